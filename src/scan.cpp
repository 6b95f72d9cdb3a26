// The scan job: wires readers, decoder, caller, tracks and summary together.
#include "tidemark/scan.hpp"

#include <fmt/format.h>

#include <memory>

#include "tidemark/error.hpp"
#include "tidemark/intervals.hpp"
#include "tidemark/output.hpp"
#include "tidemark/track.hpp"

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
    if (o.merge_gap && *o.merge_gap < 0) throw UsageError("--merge-gap must be >= 0");
    if (o.min_length && *o.min_length < 1) throw UsageError("--min-length must be >= 1");
    if (o.posterior_digits < 0 || o.posterior_digits > 12)
        throw UsageError("--posterior-digits must be from 0 to 12");
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

}  // namespace

std::vector<ContigSummary> run_scan(const ScanOptions& o, const Logger& log) {
    validate(o);
    const Profile profile = load_profile(o.profile);
    const Model model = compile(profile);

    CallOptions call_options;
    call_options.min_posterior = o.min_posterior.value_or(profile.calling.min_posterior);
    call_options.merge_gap = o.merge_gap.value_or(profile.calling.merge_gap);
    call_options.min_length = o.min_length.value_or(profile.calling.min_length);
    call_options.criteria = o.criteria;
    log.detail(fmt::format("profile {}: {} states, {} regions, max order {}; calling: "
                           "min posterior {}, merge gap {}, min length {}",
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
    if (!o.regions.empty() || !o.regions_bed.empty()) {
        const std::vector<Interval> bed = o.regions_bed.empty() ? std::vector<Interval>{} : read_bed(o.regions_bed);
        regions = resolve_regions(o.inputs[0], o.regions, bed);
    }

    OutputFile bed(o.output);
    bed.write(format_bed_header(model.name, o.command_line));
    std::unique_ptr<PosteriorTracks> tracks;
    if (!o.posteriors_prefix.empty())
        tracks = std::make_unique<PosteriorTracks>(model, o.posteriors_prefix, o.posterior_digits);

    IntervalCaller caller(model, call_options);
    RegionTotals totals(model);
    std::vector<DecodeSink*> sinks = {&caller, &totals};
    if (tracks) sinks.push_back(tracks.get());
    SinkFanout fanout(sinks);

    std::vector<ContigSummary> summaries;
    Contig contig;
    std::string lines;
    for (const auto& input : o.inputs) {
        std::unique_ptr<SequenceSource> source =
            regions.empty() ? open_fasta(input) : open_regions(input, regions);
        int64_t records = 0;
        while (source->next(contig)) {
            ++records;
            if (contig.length == 0)
                log.warn(fmt::format("{}: record '{}' is empty; no calls for it",
                                     input == "-" ? "<stdin>" : input, contig.name));
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
            s.called_bases.assign(model.region_names.size(), 0);
            s.calls.assign(model.region_names.size(), 0);
            lines.clear();
            for (const Call& call : caller.calls()) {
                lines += format_bed_line(contig, call, model.region_names[call.region]);
                s.called_bases[call.region] += call.end - call.begin;
                ++s.calls[call.region];
            }
            bed.write(lines);
            log.detail(fmt::format("{}: {} bp, {} unknown, GC {:.4f}, log-likelihood {:.4f}, {} calls",
                                   s.name, s.length, s.unknown, s.composition.gc_fraction(),
                                   s.log_likelihood, caller.calls().size()));
            summaries.push_back(std::move(s));
        }
        if (records == 0) log.warn(fmt::format("{}: no FASTA records", input == "-" ? "<stdin>" : input));
    }

    RunInfo info;
    info.profile_name = model.name;
    info.decode_mode = o.decode == DecodeMode::posterior ? "posterior" : "viterbi";
    info.command_line = o.command_line;
    info.inputs = o.inputs;
    std::unique_ptr<OutputFile> summary;
    if (!o.summary_path.empty()) {
        summary = std::make_unique<OutputFile>(o.summary_path);
        summary->write(summary_json(info, model, summaries));
    }
    // Commit only after everything has been computed and written.
    if (tracks) tracks->close();
    if (summary) summary->commit();
    bed.commit();
    log.verbose_text(summary_table(model, summaries));
    return summaries;
}

}  // namespace tidemark
