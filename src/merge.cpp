// Merge: checks the options, then wires the steps (merge_internal.hpp): shard documents ->
// records in input order (split records restored) -> summary, report and the streamed files.
#include "tidemark/merge.hpp"

#include <fmt/format.h>

#include "merge_internal.hpp"
#include "tidemark/error.hpp"

namespace tidemark {

using namespace merging;

void validate(const MergeOptions& o) {
    if (o.shard_summaries.empty() && o.shard_reports.empty())
        throw UsageError(
            "merge needs the shards' summaries (--shard-summaries) or reports (--shard-reports): "
            "they "
            "say which records each shard decoded");
    if (!o.report_path.empty() && o.shard_reports.empty())
        throw UsageError("--report needs the shards' reports (--shard-reports)");
    if (!o.output.empty() && o.shard_beds.empty())
        throw UsageError("-o/--output needs the shards' BED files (--shard-beds)");
    if (o.bgzip) check_bgzip_name(o.output, "-o/--output");
    if (o.gff3_path.empty() != o.shard_gff3.empty())
        throw UsageError(
            "--gff3 and --shard-gff3 go together: the merged file and every shard's GFF3");
    if (!o.tracks_prefix.empty() && o.shard_tracks.empty())
        throw UsageError("--posteriors needs the shards' track prefixes (--shard-posteriors)");
    if (!o.shard_tracks.empty() && o.tracks_prefix.empty())
        throw UsageError("--shard-posteriors needs --posteriors PREFIX for the merged tracks");
    const size_t n = o.shard_summaries.empty() ? o.shard_reports.size() : o.shard_summaries.size();
    if (!o.shard_summaries.empty() && !o.shard_reports.empty() && o.shard_reports.size() != n)
        throw UsageError(fmt::format("{} summaries but {} reports: give one of each per shard", n,
                                     o.shard_reports.size()));
    if (!o.shard_beds.empty() && o.shard_beds.size() != n)
        throw UsageError(
            fmt::format("{} BED files for {} shards: give one per shard", o.shard_beds.size(), n));
    if (!o.shard_gff3.empty() && o.shard_gff3.size() != n)
        throw UsageError(
            fmt::format("{} GFF3 files for {} shards: give one per shard", o.shard_gff3.size(), n));
    if (!o.shard_tracks.empty() && o.shard_tracks.size() != n)
        throw UsageError(fmt::format("{} track prefixes for {} shards: give one per shard",
                                     o.shard_tracks.size(), n));
    if (o.chrom_sizes_path.empty() != o.shard_chrom_sizes.empty())
        throw UsageError(
            "--chrom-sizes and --shard-chrom-sizes go together: the merged file and every shard's "
            "chrom sizes");
    if (!o.shard_chrom_sizes.empty() && o.shard_chrom_sizes.size() != n)
        throw UsageError(fmt::format("{} chrom-sizes files for {} shards: give one per shard",
                                     o.shard_chrom_sizes.size(), n));
    if (o.summary_path.empty() && o.report_path.empty() && o.shard_beds.empty() &&
        o.shard_tracks.empty() && o.shard_gff3.empty() && o.shard_chrom_sizes.empty())
        throw UsageError(
            "merge has nothing to write: give -o with --shard-beds, --summary, --report, "
            "--posteriors or --chrom-sizes");
}

void run_merge(const MergeOptions& o, const Logger& log) {
    validate(o);
    const std::vector<ShardDoc> summaries = read_docs(o.shard_summaries, "tidemark-summary/1");
    const std::vector<ShardDoc> reports = read_docs(o.shard_reports, "tidemark-report/1");
    // BED and track files follow the order given, so they pair with the documents as given,
    // not as sorted; read_docs keeps the given order.
    const std::vector<ShardDoc>& plan = summaries.empty() ? reports : summaries;
    const MergedRun run = assemble(plan, o.profile);
    const std::vector<ContigSummary>& contigs = run.contigs;
    std::optional<MergedRun> report_run;
    if (!summaries.empty() && !reports.empty()) {
        report_run = assemble(reports, o.profile);
        const std::vector<ContigSummary>& other = report_run->contigs;
        bool same = other.size() == contigs.size();
        for (size_t i = 0; same && i < other.size(); ++i) same = other[i].name == contigs[i].name;
        if (!same)
            throw InputError(
                "the summaries and the reports list different records; do they come from one run?");
    }
    const Model model = region_model(plan[0].doc);
    warn_on_commands(plan, log);
    RepeatedWarning undepleted(log, "records whose CpG is not depleted");
    for (const DepletionWarning& w : depletion_warnings(model, contigs)) undepleted.warn(w.message);
    undepleted.finish();

    std::unique_ptr<OutputFile> summary, report;
    if (!o.summary_path.empty()) {
        summary = std::make_unique<OutputFile>(o.summary_path);
        summary->write(summary_json(run_info(first_shard(plan).doc), model, contigs));
    }
    if (!o.report_path.empty()) {
        report = std::make_unique<OutputFile>(o.report_path);
        report->write(report_json(run_info(first_shard(reports).doc), model,
                                  report_run ? report_run->contigs : contigs,
                                  summed_resources(reports)));
    }
    OutputFormat format;
    format.bgzip = o.bgzip;
    format.tabix = o.bgzip;
    if (o.bgzip && !o.shard_beds.empty() && (o.output.empty() || o.output == "-"))
        log.warn(bgzip_to_stdout("-o/--output"));
    std::vector<std::unique_ptr<OutputFile>> texts;
    if (!o.shard_beds.empty()) {
        std::vector<std::string> lines;  // of the shared records
        for (const SplitAssembly& a : run.split) {
            lines.emplace_back();
            for (const Call& call : a.calls)
                lines.back() +=
                    format_bed_line(run.context->style, run.context->model, a.contig, call);
        }
        texts.push_back(
            merge_text(plan, run, o.shard_beds, o.output.empty() ? "-" : o.output, format, &lines));
    }
    if (!o.shard_gff3.empty()) texts.push_back(merge_gff3(plan, run, o.shard_gff3, o.gff3_path));
    std::vector<std::unique_ptr<BigWigWriter>> bigwigs;
    if (!o.shard_tracks.empty()) {
        const ShardDoc& first = first_shard(plan);
        const ordered_json recorded = first.doc["shard"].value("options", ordered_json::object());
        // The shards' recorded track format decides; without it (older shards), what is on disk.
        std::string track_format = recorded.is_object() ? recorded.value("track_format", "") : "";
        if (track_format.empty()) {
            track_format = "bedgraph";
            for (size_t r = 0; r < model.region_names.size(); ++r)
                if (model.region_report[r] &&
                    exists(o.shard_tracks[0] + "." + model.region_names[r] + ".bw"))
                    track_format = "bigwig";
        }
        const bool bigwig = track_format == "bigwig";
        if (bigwig && !run.split.empty()) {
            const int digits = recorded.is_object() ? recorded.value("posterior_digits", 3) : 3;
            if (digits > 6)
                throw InputError(
                    fmt::format("{}: the shards wrote bigWig tracks with --posterior-digits {} and "
                                "share records between "
                                "shards; bigWig stores values as float32, which cannot tell apart "
                                "some values with more than 6 "
                                "decimals, so the pieces of a shared record cannot be joined "
                                "exactly as a single run joins "
                                "them. Merge bedGraph tracks instead, or scan with "
                                "--posterior-digits 6 or fewer, or with "
                                "--whole-contigs",
                                first.path, digits));
        }
        for (size_t r = 0; r < model.region_names.size(); ++r) {
            if (!model.region_report[r]) continue;
            std::vector<std::string> files;
            for (const auto& prefix : o.shard_tracks) {
                const std::string base = prefix + "." + model.region_names[r];
                if (bigwig) {
                    const size_t k = files.size();
                    if (plan[k].contigs.empty() && plan[k].split.empty()) {  // wrote no bigWig
                        files.push_back("");
                        continue;
                    }
                    if (!exists(base + ".bw"))
                        throw InputError(fmt::format(
                            "no track {}.bw (the shards recorded --track-format bigwig)", base));
                    files.push_back(base + ".bw");
                } else if (exists(base + ".bedgraph.gz")) {
                    files.push_back(base + ".bedgraph.gz");
                } else if (exists(base + ".bedgraph")) {
                    files.push_back(base + ".bedgraph");
                } else {
                    throw InputError(fmt::format("no track {0}.bedgraph or {0}.bedgraph.gz", base));
                }
            }
            const std::string target = o.tracks_prefix + "." + model.region_names[r];
            if (bigwig)
                bigwigs.push_back(merge_bigwig(plan, run, files, target + ".bw"));
            else
                texts.push_back(merge_text(plan, run, files,
                                           target + (o.bgzip ? ".bedgraph.gz" : ".bedgraph"),
                                           format, nullptr));
        }
    }
    if (!o.shard_chrom_sizes.empty())
        texts.push_back(merge_chrom_sizes(plan, run, o.shard_chrom_sizes, o.chrom_sizes_path));
    for (auto& b : bigwigs) b->write();  // to temporary names: a failure leaves no output behind
    for (auto& b : bigwigs) b->commit();
    for (auto& t : texts) t->commit();
    if (summary) summary->commit();
    if (report) report->commit();
    int64_t bases = 0;
    for (const auto& c : contigs) bases += c.length;
    log.info(fmt::format("merge: {} shards, {} records ({} shared between shards), {} bp",
                         plan.size(), contigs.size(), run.split.size(), bases));
}

}  // namespace tidemark
