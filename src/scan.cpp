// The scan job: wires readers, decoder, caller, tracks, summary and report together.
#include "tidemark/scan.hpp"

#include <fmt/format.h>
#include <zlib.h>

#include <memory>
#include <nlohmann/json.hpp>

#include "tidemark/error.hpp"
#include "tidemark/intervals.hpp"
#include "tidemark/output.hpp"

namespace tidemark {

void validate(const ScanOptions& o) {
    if (o.inputs.empty()) throw UsageError("scan needs at least one FASTA file (or - for stdin)");
    const bool by_region = !o.regions.empty() || !o.regions_bed.empty();
    if (by_region && o.inputs.size() != 1)
        throw UsageError("--region and --regions-bed take exactly one indexed FASTA file");
    int stdin_count = 0;
    for (const auto& in : o.inputs) stdin_count += (in == "-");
    if (stdin_count > 1) throw UsageError("standard input (-) can be given only once");
    if (o.min_posterior && (!(*o.min_posterior > 0) || *o.min_posterior > 1))
        throw UsageError("--min-posterior must be in (0, 1]");
    if (!(o.high_posterior > 0) || o.high_posterior > 1) throw UsageError("--core-posterior must be in (0, 1]");
    if (o.merge_gap && *o.merge_gap < 0) throw UsageError("--merge-gap must be >= 0");
    if (o.min_length && *o.min_length < 1) throw UsageError("--min-length must be >= 1");
    if (o.tracks.digits < 0 || o.tracks.digits > 12) throw UsageError("--posterior-digits must be from 0 to 12");
    if (o.tracks.bin < 1) throw UsageError("--bin must be at least 1");
    if (o.tracks.format == TrackFormat::bigwig && o.tracks.prefix.empty())
        throw UsageError("--track-format bigwig needs --posteriors PREFIX");
    if (o.tracks.format == TrackFormat::bigwig && o.tracks.track_line)
        throw UsageError("--track-line applies to bedGraph, not bigWig");
    if (o.block_size < 0) throw UsageError("--block must be >= 0");
}

namespace {

struct Decoder {
    std::unique_ptr<PosteriorDecoder> posterior;
    std::unique_ptr<ViterbiDecoder> viterbi;
    DecodeResult run(const Contig& c, DecodeSink& sink) {
        return posterior ? posterior->run(c, sink) : viterbi->run(c, sink);
    }
};

std::string crc32_hex(const std::string& text) {
    const uLong crc = crc32(crc32(0L, Z_NULL, 0), reinterpret_cast<const Bytef*>(text.data()),
                            static_cast<uInt>(text.size()));
    return fmt::format("{:08x}", crc);
}

std::string options_json(const ScanOptions& o, const CallOptions& c) {
    nlohmann::ordered_json j;
    j["profile"] = o.profile;
    j["decode"] = o.decode == DecodeMode::posterior ? "posterior" : "viterbi";
    j["regions"] = o.regions;
    j["regions_bed"] = o.regions_bed;
    j["min_posterior"] = c.min_posterior;
    j["merge_gap"] = c.merge_gap;
    j["min_length"] = c.min_length;
    j["core_posterior"] = c.high_posterior;
    const char* criteria[] = {"none", "ggf1987", "tj2002"};
    j["island_criteria"] = criteria[static_cast<int>(c.criteria)];
    j["bed_style"] = o.bed_style == BedStyle::plain ? "plain" : "browser";
    j["bgzip"] = o.bgzip;
    j["posteriors"] = o.tracks.prefix;
    j["posterior_digits"] = o.tracks.digits;
    j["bin"] = o.tracks.bin;
    j["track_format"] = o.tracks.format == TrackFormat::bedgraph ? "bedgraph" : "bigwig";
    j["block"] = o.block_size;
    return j.dump();
}

std::string display(const std::string& path) { return path == "-" ? "<stdin>" : path; }

}  // namespace

std::vector<ContigSummary> run_scan(const ScanOptions& o, const Logger& log) {
    const Stopwatch clock;
    validate(o);
    const Profile profile = load_profile(o.profile);
    const Model model = compile(profile);

    CallOptions call_options;
    call_options.min_posterior = o.min_posterior.value_or(profile.calling.min_posterior);
    call_options.merge_gap = o.merge_gap.value_or(profile.calling.merge_gap);
    call_options.min_length = o.min_length.value_or(profile.calling.min_length);
    call_options.high_posterior = o.high_posterior;
    call_options.criteria = o.criteria;
    log.detail(fmt::format("profile {}: {} states, {} regions, max order {}; calling: min posterior {}, "
                           "merge gap {}, min length {}",
                           model.name, model.states, model.region_names.size(), model.max_order,
                           call_options.min_posterior, call_options.merge_gap, call_options.min_length));

    DecoderOptions decoder_options;
    decoder_options.block_size = o.block_size;
    Decoder decoder;
    if (o.decode == DecodeMode::posterior)
        decoder.posterior = std::make_unique<PosteriorDecoder>(model, decoder_options);
    else
        decoder.viterbi = std::make_unique<ViterbiDecoder>(model, decoder_options);

    // Resolve regions before creating any output, so a bad region leaves no file behind.
    std::vector<Region> regions;
    int64_t total_bases = 0;
    if (!o.regions.empty() || !o.regions_bed.empty()) {
        const std::vector<Interval> bed = o.regions_bed.empty() ? std::vector<Interval>{} : read_bed(o.regions_bed);
        regions = resolve_regions(o.inputs[0], o.regions, bed);
        for (const auto& r : regions) total_bases += r.end - r.begin;
    }

    OutputFormat bed_format;
    bed_format.bgzip = o.bgzip;
    bed_format.tabix = o.bgzip;
    bed_format.skip_lines = o.bed_style == BedStyle::browser ? 1 : 0;
    OutputFile bed(o.output, bed_format);
    bed.write(format_bed_header(o.bed_style, model, o.command_line));
    std::unique_ptr<OutputFile> gff3, sizes;
    if (!o.gff3_path.empty()) {
        gff3 = std::make_unique<OutputFile>(o.gff3_path);
        gff3->write(format_gff3_header());
    }
    if (!o.chrom_sizes_path.empty()) sizes = std::make_unique<OutputFile>(o.chrom_sizes_path);
    std::unique_ptr<PosteriorTracks> tracks;
    if (!o.tracks.prefix.empty()) {
        TrackOptions t = o.tracks;
        t.bgzip = o.bgzip && t.format == TrackFormat::bedgraph;
        tracks = std::make_unique<PosteriorTracks>(model, t);
    }

    IntervalCaller caller(model, call_options);
    RegionTotals totals(model);
    ProgressMeter progress(o.progress, total_bases);
    std::vector<DecodeSink*> sinks = {&caller, &totals};
    if (tracks) sinks.push_back(tracks.get());
    sinks.push_back(&progress);
    SinkFanout fanout(sinks);

    std::vector<ContigSummary> summaries;
    Contig contig;
    std::string lines, gff_lines;
    int64_t serial = 0;
    std::string last_sized;
    for (const auto& input : o.inputs) {
        std::unique_ptr<SequenceSource> source = regions.empty() ? open_fasta(input) : open_regions(input, regions);
        int64_t records = 0;
        while (source->next(contig)) {
            ++records;
            if (contig.length == 0) {
                progress.finish();
                log.warn(fmt::format("{}: record '{}' is empty; no calls for it", display(input), contig.name));
            }
            const DecodeResult result = decoder.run(contig, fanout);
            ContigSummary s;
            s.name = contig.name;
            s.offset = contig.offset;
            s.length = contig.length;
            s.unknown = contig.unknown_count();
            s.soft_masked = contig.soft_masked;
            s.composition = composition(contig, 0, contig.length);
            s.log_likelihood = result.log_likelihood;
            s.expected_bases = totals.expected_bases();
            s.expected_bases.resize(model.region_names.size(), 0.0);
            s.calls.assign(model.region_names.size(), 0);
            s.called_bases.assign(model.region_names.size(), 0);
            s.call_lengths.assign(model.region_names.size(), {});
            s.confidence_sum.assign(model.region_names.size(), 0.0);
            s.call_confidences.assign(model.region_names.size(), {});
            lines.clear();
            gff_lines.clear();
            if (gff3) gff_lines = format_gff3_sequence_region(contig);
            for (const Call& call : caller.calls()) {
                lines += format_bed_line(o.bed_style, model, contig, call);
                if (gff3) gff_lines += format_gff3_feature(model, contig, call, ++serial);
                s.add_call(call, model.region_names.size());
            }
            bed.write(lines);
            if (gff3) gff3->write(gff_lines);
            if (sizes && contig.name != last_sized) {  // several regions of one sequence: once
                sizes->write(fmt::format("{}\t{}\n", contig.name, contig.full_length()));
                last_sized = contig.name;
            }
            if (log.level() >= LogLevel::verbose) progress.finish();
            log.detail(fmt::format("{}: {} bp, {} unknown, GC {:.4f}, log-likelihood {:.4f}, {} calls", s.name,
                                   s.length, s.unknown, s.composition.gc_fraction(), s.log_likelihood,
                                   caller.calls().size()));
            summaries.push_back(std::move(s));
        }
        if (records == 0) {
            progress.finish();
            log.warn(fmt::format("{}: no FASTA records", display(input)));
        }
    }
    progress.finish();

    RunInfo info;
    info.profile_name = model.name;
    info.profile_checksum = crc32_hex(to_json(profile));
    info.decode_mode = o.decode == DecodeMode::posterior ? "posterior" : "viterbi";
    info.command_line = o.command_line;
    info.inputs = o.inputs;
    info.options_json = options_json(o, call_options);
    std::unique_ptr<OutputFile> summary, report;
    if (!o.summary_path.empty()) {
        summary = std::make_unique<OutputFile>(o.summary_path);
        summary->write(summary_json(info, model, summaries));
    }
    // Commit only after everything has been computed and written.
    if (tracks) tracks->close();
    if (gff3) gff3->commit();
    if (sizes) sizes->commit();
    if (summary) summary->commit();
    bed.commit();
    const ResourceUsage usage = clock.now();
    if (!o.report_path.empty()) {
        report = std::make_unique<OutputFile>(o.report_path);
        report->write(report_json(info, model, summaries, usage));
        report->commit();
    }
    log.verbose_text(summary_table(model, summaries));
    if (log.level() >= LogLevel::normal) std::fputs(genome_table(model, summaries, usage).c_str(), stderr);
    return summaries;
}

}  // namespace tidemark
