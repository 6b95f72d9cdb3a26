// The scan job: wires readers, decoder, caller, tracks, summary and report together.
#include "tidemark/scan.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <limits>
#include <memory>
#include <nlohmann/json.hpp>

#include "byte_source.hpp"
#include "name_set.hpp"
#include "pipeline.hpp"
#include "thread_pool.hpp"
#include "tidemark/contig_screen.hpp"
#include "tidemark/error.hpp"
#include "tidemark/intervals.hpp"
#include "tidemark/output.hpp"
#include "tidemark/report_html.hpp"
#include "tidemark/shard.hpp"
#include "tidemark/window.hpp"

namespace tidemark {

std::string recorded_command_line(const std::string& command_line) {
    // Words split at spaces outside single quotes, as the command line was quoted.
    std::vector<std::string> words;
    std::string word;
    bool quoted = false;
    for (char c : command_line) {
        if (c == '\'') quoted = !quoted;
        if (c == ' ' && !quoted) {
            words.push_back(word);
            word.clear();
        } else {
            word += c;
        }
    }
    words.push_back(word);
    const auto digits_from = [](const std::string& w, size_t at) {
        return w.size() > at && w.find_first_not_of("0123456789", at) == std::string::npos;
    };
    std::string out;
    for (size_t i = 0; i < words.size(); ++i) {
        const std::string& w = words[i];
        if ((w == "-t" || w == "--threads" || w == "--shard" || w == "--seams") &&
            i + 1 < words.size()) {
            ++i;  // the option's value
            continue;
        }
        if (w == "--whole-contigs" || w.rfind("--threads=", 0) == 0 ||
            w.rfind("--shard=", 0) == 0 || w.rfind("--seams=", 0) == 0 ||
            (w.rfind("-t", 0) == 0 && digits_from(w, 2)))
            continue;
        out += (out.empty() ? "" : " ") + w;
    }
    return out;
}

void validate(const ScanOptions& o) {
    if (o.inputs.empty()) throw UsageError("scan needs at least one FASTA file (or - for stdin)");
    const bool by_region = !o.regions.empty() || !o.regions_bed.empty();
    if (by_region && o.inputs.size() != 1)
        throw UsageError("--region and --regions-bed take exactly one indexed FASTA file");
    int stdin_count = 0;
    for (const auto& in : o.inputs) stdin_count += (in == "-");
    if (stdin_count > 1) throw UsageError("standard input (-) can be given only once");
    for (size_t i = 0; i < o.inputs.size(); ++i)
        for (size_t k = 0; k < i; ++k)
            if (o.inputs[i] == o.inputs[k] && o.inputs[i] != "-")
                throw UsageError(fmt::format(
                    "'{}' is given twice; its records would be decoded twice", o.inputs[i]));
    if (o.min_posterior && (!(*o.min_posterior > 0) || *o.min_posterior > 1))
        throw UsageError("--min-posterior must be in (0, 1]");
    if (!(o.high_posterior > 0) || o.high_posterior > 1)
        throw UsageError("--core-posterior must be in (0, 1]");
    if (o.merge_gap && *o.merge_gap < 0) throw UsageError("--merge-gap must be >= 0");
    if (o.min_length && *o.min_length < 1) throw UsageError("--min-length must be >= 1");
    if (o.tracks.digits < 0 || o.tracks.digits > 12)
        throw UsageError("--posterior-digits must be from 0 to 12");
    if (o.tracks.bin < 1) throw UsageError("--bin must be at least 1");
    if (o.bgzip) check_bgzip_name(o.output, "-o/--output");
    if (o.tracks.format == TrackFormat::bigwig && o.tracks.prefix.empty())
        throw UsageError("--track-format bigwig needs --posteriors PREFIX");
    if (o.tracks.format == TrackFormat::bigwig && o.tracks.track_line)
        throw UsageError("--track-line applies to bedGraph, not bigWig");
    if (o.block_size < 0) throw UsageError("--block must be >= 0");
    if (o.threads < 0) throw UsageError("--threads must be >= 0 (0 = every core)");
    if ((!o.emit_seams.empty() || !o.seams.empty() || o.whole_contigs) && !o.shard.active())
        throw UsageError("--emit-seams, --seams and --whole-contigs go with --shard I/N");
    if ((!o.emit_seams.empty() || !o.seams.empty()) && o.decode == DecodeMode::viterbi)
        throw UsageError(
            "--emit-seams and --seams are for posterior decoding; Viterbi shards keep records "
            "whole");
    if (!o.emit_seams.empty() && !o.seams.empty())
        throw UsageError("--emit-seams is the first step and --seams the second: give one of them");
    if (o.whole_contigs && (!o.emit_seams.empty() || !o.seams.empty()))
        throw UsageError("--whole-contigs keeps every record on one shard, so there are no seams");
    if (!o.html_path.empty() && o.shard.active())
        throw UsageError(
            "--html is written by a run over the whole input; merge does not build it from shards");
    if (!o.emit_seams.empty() &&
        (o.output != "-" || !o.summary_path.empty() || !o.report_path.empty() ||
         !o.gff3_path.empty() || !o.chrom_sizes_path.empty() || !o.tracks.prefix.empty()))
        throw UsageError(
            "--emit-seams writes only the seams file; give the outputs to the second step "
            "(--seams)");
}

namespace {

struct Decoder {
    std::unique_ptr<PosteriorDecoder> posterior;
    std::unique_ptr<ViterbiDecoder> viterbi;
    const Model* window_model = nullptr;  ///< set for window models: sinks then see bases
    DecodeResult run(const Contig& c, DecodeSink& sink, TaskPool* pool = nullptr,
                     PosteriorDecoder::EarlySweeps* early = nullptr) {
        if (window_model) {
            WindowExpander bases(*window_model, sink);
            return posterior ? posterior->run(c, bases, pool, early) : viterbi->run(c, bases);
        }
        return posterior ? posterior->run(c, sink, pool, early) : viterbi->run(c, sink);
    }
    /// Whether a record of this length should have the whole pool of `threads` workers: when it
    /// splits into at least two segments per worker. Fewer segments share a pool poorly (a
    /// 2-Mbp record in two segments kept the second worker idle half the time); such records
    /// are one worker's job, their segments decoded one after another, with the same results.
    bool decodes_alone(int64_t length, int threads) const {
        return posterior && posterior->splits(length) &&
               posterior->segment_count(length) >= 2 * static_cast<size_t>(threads);
    }
};

RunOptions run_options(const ScanOptions& o, const CallOptions& c) {
    RunOptions r;
    r.profile = o.profile;
    r.decode = o.decode == DecodeMode::posterior ? "posterior" : "viterbi";
    r.regions = o.regions;
    r.regions_bed = o.regions_bed;
    r.calling = c;
    r.bed_style = o.bed_style;
    r.bgzip = o.bgzip;
    r.posteriors = o.tracks.prefix;
    r.posterior_digits = o.tracks.digits;
    r.bin = o.tracks.bin;
    r.track_format = o.tracks.format;
    r.block = o.block_size;
    r.soft_masked_unknown = o.soft_masked == SoftMasked::unknown;
    return r;
}

std::string display(const std::string& path) {
    return path == "-" ? "<stdin>" : path;
}

std::string join_words(const std::vector<std::string>& words) {
    std::string out;
    for (const auto& w : words) out += (out.empty() ? "" : ", ") + w;
    return out;
}

// Record names key every output (BED, tracks, summary), so they must be unique across all inputs,
// as the reader checks within one file.
// Names across inputs, one compact set per input (the reader already refuses a name repeated
// within one): about 16-32 B a record plus the name, where a map of name -> input took over
// 100; a record is looked up in each earlier input's set.
class NamesByInput {
public:
    void check(const std::string& input, const std::string& name) {
        if (inputs_.empty() || inputs_.back().first != input)
            inputs_.emplace_back(input, detail::NameSet());
        for (size_t i = 0; i + 1 < inputs_.size(); ++i)
            if (inputs_[i].second.contains(name))
                throw InputError(fmt::format(
                    "{}: record '{}' has the same name as a record of {}; record names must be "
                    "unique across all inputs (outputs name records by name)",
                    display(input), name, display(inputs_[i].first)));
        inputs_.back().second.insert(name);
    }

private:
    std::vector<std::pair<std::string, detail::NameSet>> inputs_;
};

// Step 1 for shared records: the seams of this shard's segments, and nothing else.
void emit_seams(const ScanOptions& o, ShardFilter& shard, const std::string& identity,
                Decoder& decoder, int threads, const Logger& log,
                const std::vector<Region>& regions) {
    OutputFile out(o.emit_seams);
    TaskPool pool(threads);
    const std::vector<SeamsRecord> records =
        compute_seams(shard, *decoder.posterior, o.inputs, regions, threads > 1 ? &pool : nullptr);
    size_t segments = 0;
    for (const auto& r : records) segments += r.seams.size();
    out.write(seams_json(o.shard, identity, records));
    out.commit();
    log.info(fmt::format("shard {}/{}: seams of {} segments of {} shared records", o.shard.index,
                         o.shard.count, segments, records.size()));
}

// Step 2 for a shared record: this shard's segments, decoded from every shard's seams; each
// segment's caller and totals are kept for merge, the tracks are written for the pieces.
SplitRecord decode_split(const Contig& contig, int64_t input_index, const ShardFilter& shard,
                         const SeamsTable& seams, PosteriorDecoder& decoder,
                         const IntervalCaller& caller, const RegionTotals& totals,
                         PosteriorTracks* tracks, const ProgressMeter& progress, TaskPool* pool) {
    const std::vector<SegmentSeam> all =
        seams.record(input_index, contig.name, contig.length, shard.segments());
    SplitRecord record;
    ContigSummary& s = record.whole;
    s.name = contig.name;
    s.input_index = input_index;
    s.offset = contig.offset;
    s.length = contig.length;
    // Composition and unknown bases come from the segments' marks at merge (this shard may hold
    // only its pieces' bases); soft_masked is this shard's share: its pieces' lowercase bases
    // when it read only those, else the whole record's from the shard with the first segment.
    const std::vector<ShardPiece> pieces = shard.my_pieces();
    s.soft_masked = shard.reading_share() || pieces.front().first == 0 ? contig.soft_masked : 0;
    s.log_likelihood = std::numeric_limits<double>::quiet_NaN();
    record.full_length = contig.full_length();
    record.segments = shard.segments();
    for (const ShardPiece& piece : pieces) {
        std::unique_ptr<DecodeSink> piece_caller = caller.fork(), piece_totals = totals.fork(),
                                    piece_progress = progress.fork(), piece_tracks;
        std::vector<DecodeSink*> sinks = {piece_caller.get(), piece_totals.get(),
                                          piece_progress.get()};
        if (tracks) {
            piece_tracks = tracks->fork();
            sinks.push_back(piece_tracks.get());
        }
        SinkFanout fanout(sinks);
        fanout.begin_contig(contig);
        const auto take = [&](size_t k, DecodeSink& fork) {
            auto& parts = dynamic_cast<SinkFanout&>(fork);
            const int64_t begin = all[k].begin, end = all[k].end;
            record.done.push_back(describe_segment(contig, k, begin, end,
                                                   dynamic_cast<IntervalCaller&>(parts.part(0)),
                                                   dynamic_cast<RegionTotals&>(parts.part(1))));
            if (piece_tracks) piece_tracks->join(parts.part(3));
        };
        const DecodeResult result =
            decoder.run_segments(contig, all, piece.first, piece.last, fanout, take, pool);
        if (piece.last == record.segments) s.log_likelihood = result.log_likelihood;
        if (piece_tracks) {
            piece_tracks->end_contig(contig, result);  // the piece's last run ends at its end
            tracks->join(*piece_tracks);
        }
    }
    return record;
}

class ScanJob;

// What a scan writes, and the run-wide sinks every record's forks join into.
struct ScanOutputs {
    ScanOutputs(const ScanOptions& options, const Model& region_model, const CallOptions& calling,
                int64_t total_bases, int threads, const Logger& logger)
        : o(options),
          model(region_model),
          log(logger),
          empty_records(logger, "empty records"),
          bed(o.output, bed_format(o, threads)),
          caller(model, calling),
          totals(model),
          progress(o.progress, total_bases),
          summary(
              model, o.soft_masked == SoftMasked::unknown,
              {!o.summary_path.empty(), !o.report_path.empty(), log.level() >= LogLevel::verbose}),
          keep_summaries(!o.html_path.empty() || o.shard.active()) {
        bed.write(format_bed_header(o.bed_style, model, o.command_line));
        if (!o.gff3_path.empty()) {
            gff3 = std::make_unique<OutputFile>(o.gff3_path);
            gff3->write(format_gff3_header());
        }
        if (!o.chrom_sizes_path.empty()) sizes = std::make_unique<OutputFile>(o.chrom_sizes_path);
        if (!o.tracks.prefix.empty()) {
            TrackOptions t = o.tracks;
            t.bgzip = o.bgzip && t.format == TrackFormat::bedgraph;
            t.threads = threads;
            tracks = std::make_unique<PosteriorTracks>(model, t);
        }
        if (!o.html_path.empty()) html = std::make_unique<HtmlReport>(model);
    }

    /// Joins a decoded record's forks (in input order) and writes its outputs.
    void finish(ScanJob& job);

    static OutputFormat bed_format(const ScanOptions& o, int threads) {
        OutputFormat f;
        f.threads = threads;
        f.bgzip = o.bgzip;
        f.tabix = o.bgzip;
        f.skip_lines = o.bed_style == BedStyle::browser ? 1 : 0;
        return f;
    }

    /// One line of --chrom-sizes per sequence (several regions of one sequence: once).
    void write_size(const Contig& contig) {
        if (!sizes || contig.name == last_sized) return;
        sizes->write(fmt::format("{}\t{}\n", contig.name, contig.full_length()));
        last_sized = contig.name;
    }

    const ScanOptions& o;
    const Model& model;
    const Logger& log;
    RepeatedWarning empty_records;
    OutputFile bed;
    std::unique_ptr<OutputFile> gff3, sizes;
    std::unique_ptr<PosteriorTracks> tracks;
    IntervalCaller caller;
    RegionTotals totals;
    ProgressMeter progress;
    std::unique_ptr<HtmlReport> html;
    SummaryBuilder summary;
    bool keep_summaries;              ///< --html and shard runs list every record's summary
    std::vector<ContigSummary> kept;  ///< those summaries
    ContigSummary record;             ///< the record being finished (its storage reused)
    std::vector<SplitRecord> shared;  ///< this shard's pieces of records split between shards
    int64_t serial = 0;               ///< GFF3 feature number
    std::string last_sized, lines, gff_lines;
};

// One record of a scan: forks of the run's sinks, decoded on a worker, joined back in order.
class ScanJob final : public detail::PipelineJob {
public:
    ScanJob(ScanOutputs& run, std::vector<Decoder>& decoders) : run_(run), decoders_(decoders) {}
    /// Forks of the run's sinks for the next record. A reused job keeps its caller and totals
    /// forks (they start afresh at every contig, and their joins swap buffers, so reuse
    /// allocates nothing); track and report forks are made anew.
    void fork_sinks() {
        if (!caller) caller = run_.caller.fork();
        if (!totals) totals = run_.totals.fork();
        if (run_.tracks) tracks = run_.tracks->fork();
        // A progress line counts every block into shared atomics: only when it is drawn.
        if (run_.progress.enabled() && !progress) progress = run_.progress.fork();
        if (run_.html) html = run_.html->fork();
    }
    void decode(int worker, TaskPool* segments) override {
        // A record decoded alone (over the whole pool) is decoded on the queuing thread after
        // every earlier record was finished (pipeline.hpp), so its segments are joined straight
        // into the run's tracks, and their lines reach the files (and the BGZF compression
        // threads) while later segments decode, instead of all at the record's end.
        direct_tracks = segments != nullptr && run_.tracks;
        std::vector<DecodeSink*> sinks = {caller.get(), totals.get()};
        if (direct_tracks)
            sinks.push_back(run_.tracks.get());
        else if (tracks)
            sinks.push_back(tracks.get());
        if (progress) sinks.push_back(progress.get());
        if (html) sinks.push_back(html.get());
        SinkFanout fanout(sinks);
        result = decoders_[static_cast<size_t>(worker)].run(contig, fanout, segments, &early_);
    }
    // The records decoded alone are worker 0's (DecodePipeline::queue), so are their sweeps.
    void decode_early(TaskPool& pool) override {
        if (decoders_[0].posterior) decoders_[0].posterior->sweep_early(contig, pool, early_);
    }
    void finish() override { run_.finish(*this); }

    const std::string* input = nullptr;  ///< the file the record comes from
    int64_t input_index = 0;
    std::unique_ptr<DecodeSink> caller, totals, tracks, progress, html;
    bool direct_tracks = false;  ///< decoded into the run's tracks: nothing to join
    DecodeResult result;

private:
    ScanOutputs& run_;
    std::vector<Decoder>& decoders_;
    PosteriorDecoder::EarlySweeps early_;
};

void ScanOutputs::finish(ScanJob& job) {
    const Contig& contig = job.contig;
    caller.join(*job.caller);
    totals.join(*job.totals);
    if (tracks && !job.direct_tracks) tracks->join(*job.tracks);
    if (html) {
        html->join(*job.html);
        html->finish_sequence(contig, caller.calls());
    }
    if (contig.length == 0) {
        progress.finish();
        empty_records.warn(fmt::format("{}: record '{}' is empty; no calls for it",
                                       display(*job.input), contig.name));
    }
    ContigSummary& s = record;
    s.name = contig.name;
    s.input_index = job.input_index;
    s.offset = contig.offset;
    s.length = contig.length;
    s.unknown = contig.unknown_count();
    s.soft_masked = contig.soft_masked;
    s.composition = composition(contig, 0, contig.length);
    s.composition_distance = s.composition_limit = std::numeric_limits<double>::quiet_NaN();
    if (model.contig_screen && s.composition.known() >= ContigScreenRule::min_known) {
        const TrinucleotideCounts counts = trinucleotide_counts(contig, 0, contig.length);
        s.composition_distance = screen_distance(*model.contig_screen, counts);
        s.composition_limit = screen_limit(*model.contig_screen, counts.known);
    }
    s.log_likelihood = job.result.log_likelihood;
    s.expected_bases = totals.expected_bases();
    s.reset_calls(model.region_names.size());
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
    write_size(contig);
    if (log.level() >= LogLevel::verbose) {  // formatted only when shown: a draft has 10^5 records
        progress.finish();
        log.detail(fmt::format("{}: {} bp, {} unknown, GC {:.4f}, log-likelihood {:.4f}, {} calls",
                               s.name, s.length, s.unknown, s.composition.gc_fraction(),
                               s.log_likelihood, caller.calls().size()));
    }
    summary.add(s);
    if (keep_summaries) kept.push_back(s);
}
std::vector<Decoder> make_decoders(const ScanOptions& o, const Model& decoding_model,
                                   const DecoderOptions& options, int threads) {
    std::vector<Decoder> decoders(static_cast<size_t>(threads));
    for (auto& d : decoders) {
        if (o.decode == DecodeMode::posterior)
            d.posterior = std::make_unique<PosteriorDecoder>(decoding_model, options);
        else
            d.viterbi = std::make_unique<ViterbiDecoder>(decoding_model, options);
        if (decoding_model.window > 0) d.window_model = &decoding_model;
    }
    return decoders;
}

// The summary, HTML page and report, then every output committed; the tables on stderr.
void write_run_documents(ScanOutputs& run, const RunInfo& info, const Profile& profile,
                         const CallOptions& call_options, const Stopwatch& clock) {
    const ScanOptions& o = run.o;
    const Model& model = run.model;
    const Logger& log = run.log;
    std::unique_ptr<OutputFile> summary, report;
    if (!o.summary_path.empty()) {
        summary = std::make_unique<OutputFile>(o.summary_path);
        run.summary.write_summary(info, [&](std::string_view text) { summary->write(text); });
    }
    std::unique_ptr<OutputFile> page;
    if (run.html) {
        page = std::make_unique<OutputFile>(o.html_path);
        page->write(
            format_html_report({&info, &profile, &model, &call_options, &run.kept, run.html.get(),
                                &log.warnings(), log.warning_count(), o.output}));
    }
    // Commit only after everything has been computed and written.
    if (run.tracks) run.tracks->close();
    if (run.gff3) run.gff3->commit();
    if (run.sizes) run.sizes->commit();
    if (summary) summary->commit();
    if (page) page->commit();
    run.bed.commit();
    const ResourceUsage usage = clock.now();
    if (!o.report_path.empty()) {
        report = std::make_unique<OutputFile>(o.report_path);
        run.summary.write_report(info, usage, [&](std::string_view text) { report->write(text); });
        report->commit();
    }
    if (log.level() >= LogLevel::verbose) {
        std::string table;
        run.summary.write_table([&](std::string_view text) { table += text; });
        log.verbose_text(table);
    }
    if (log.level() >= LogLevel::normal)
        std::fputs(run.summary.genome_table(usage).c_str(), stderr);
}

}  // namespace

CallOptions calling_options(const ScanOptions& o, const Profile& profile, const Model& model) {
    if (o.criteria != IslandCriteria::none &&
        std::find(model.region_names.begin(), model.region_names.end(), island_region_name) ==
            model.region_names.end())
        throw UsageError(fmt::format(
            "--island-criteria judges calls of the region type '{}', which profile '{}' does "
            "not have; drop the option (its regions: {})",
            island_region_name, model.name, join_words(model.region_names)));
    CallOptions call_options;
    call_options.min_posterior = o.min_posterior.value_or(profile.calling.min_posterior);
    call_options.merge_gap = o.merge_gap.value_or(profile.calling.merge_gap);
    call_options.min_length = o.min_length.value_or(profile.calling.min_length);
    call_options.high_posterior = o.high_posterior;
    call_options.criteria = o.criteria;
    return call_options;
}

void run_scan(const ScanOptions& o, const Logger& log) {
    const Stopwatch clock;
    validate(o);
    if (o.bgzip && o.output == "-" && o.emit_seams.empty())
        log.warn(bgzip_to_stdout("-o/--output"));
    const Profile profile = load_profile(o.profile);
    require_fitted(profile);
    const Model decoding_model = compile(profile);
    // Window models decode one position per window; calls, tracks and totals see their
    // posteriors base by base, one state per region (window.hpp).
    const Model model = decoding_model.window > 0 ? region_view(decoding_model) : decoding_model;

    const CallOptions call_options = calling_options(o, profile, model);
    log.detail(fmt::format(
        "profile {}: {} states, {} regions, max order {}; calling: min posterior {}, "
        "merge gap {}, min length {}",
        model.name, decoding_model.states, model.region_names.size(), decoding_model.max_order,
        call_options.min_posterior, call_options.merge_gap, call_options.min_length));

    DecoderOptions decoder_options;
    decoder_options.block_size = o.block_size;
    // Segments of long contigs end on bin boundaries, so no track bin straddles a seam.
    decoder_options.segment_multiple = o.tracks.bin;

    // Resolve regions before creating any output, so a bad region leaves no file behind.
    std::vector<Region> regions;
    int64_t total_bases = 0;
    if (!o.regions.empty() || !o.regions_bed.empty()) {
        const std::vector<Interval> bed =
            o.regions_bed.empty() ? std::vector<Interval>{} : read_bed(o.regions_bed);
        regions = resolve_regions(o.inputs[0], o.regions, bed);
        for (const auto& r : regions) total_bases += r.end - r.begin;
    }
    // One decoder per worker; the first also says how long contigs split into segments.
    const int threads = resolve_threads(o.threads);
    // With more than one thread, compressed input is inflated ahead of the parser on a thread of
    // its own (byte_source.hpp), off the decoding path.
    const detail::DecompressionThreads decompression(threads > 1 ? 1 : 0);
    std::vector<Decoder> decoders = make_decoders(o, decoding_model, decoder_options, threads);
    const int64_t segment_length =
        decoders[0].posterior && !o.whole_contigs ? decoders[0].posterior->segment_length() : 0;

    // Planned before any output exists, like the regions; every shard makes the same plan.
    ShardFilter shard(o.shard, o.inputs, regions, segment_length);
    shard.set_soft_masked(o.soft_masked);
    const std::string identity =
        seams_identity(o.inputs, o.regions, o.regions_bed, profile_checksum(profile), o.block_size,
                       o.tracks.bin, segment_length);
    if (!o.emit_seams.empty()) {
        emit_seams(o, shard, identity, decoders[0], threads, log, regions);
        return;
    }
    if (shard.has_pieces() && o.seams.empty())
        throw UsageError(
            fmt::format("shard {}/{} decodes part of a record shared between shards ({}). Such "
                        "records take two steps: "
                        "first 'scan ... --shard I/N --emit-seams seams.I.json' for every shard I, "
                        "then this command "
                        "with '--seams seams.1.json --seams seams.2.json ...' (all of them); or "
                        "add --whole-contigs to keep "
                        "every record on one shard",
                        o.shard.index, o.shard.count, join_words(shard.split_records())));
    const SeamsTable seams =
        o.seams.empty() ? SeamsTable() : SeamsTable(o.seams, identity, o.shard);

    ScanOutputs run(o, model, call_options, total_bases, threads, log);
    // Records are decoded in a pool (small ones batched, long ones over the whole pool) and
    // finished in input order (pipeline.hpp).
    detail::DecodePipeline pipeline(
        threads, [&](int64_t length) { return decoders[0].decodes_alone(length, threads); });

    NamesByInput names;
    for (const auto& input : o.inputs) {
        std::unique_ptr<SequenceSource> source = shard.open(input, regions);
        // A chromosome's first segments start decoding while the rest of it is read (a shard
        // may read records another shard decodes, or decode only some of their segments).
        ScanJob* being_read = nullptr;
        if (threads > 1 && segment_length > 0 && !o.shard.active())
            source->watch_growth([&](const Contig&) { pipeline.reading(*being_read); },
                                 segment_length);
        int64_t records = 0;
        for (;;) {
            std::unique_ptr<ScanJob> job(
                static_cast<ScanJob*>(pipeline.reuse_finished().release()));
            if (!job) job = std::make_unique<ScanJob>(run, decoders);
            job->input = &input;
            being_read = job.get();
            bool more = false;
            try {
                more = source->next(job->contig);
                if (more && !o.tracks.prefix.empty() && o.tracks.format == TrackFormat::bigwig)
                    check_bigwig_length(job->contig.name, job->contig.full_length());
            } catch (...) {
                pipeline.drain();  // an earlier record's error comes first, as with one thread
                throw;
            }
            if (!more) break;
            ++records;
            if (regions.empty() && o.inputs.size() > 1) names.check(input, job->contig.name);
            if (!shard.take(job->contig)) continue;  // another shard's record
            job->input_index = shard.record_index();
            if (shard.split()) {  // this shard's segments of a shared record
                pipeline.drain();
                run.shared.push_back(decode_split(job->contig, job->input_index, shard, seams,
                                                  *decoders[0].posterior, run.caller, run.totals,
                                                  run.tracks.get(), run.progress, pipeline.pool()));
                run.write_size(job->contig);
                continue;
            }
            job->fork_sinks();
            pipeline.queue(std::move(job));
        }
        if (records == 0 && !shard.reading_share()) {
            pipeline.drain();  // keep messages in input order
            run.progress.finish();
            log.warn(fmt::format("{}: no FASTA records", display(input)));
        }
    }
    pipeline.drain();
    run.progress.finish();
    run.empty_records.finish();
    shard.finish();
    // Nothing decoded is a wrong input, not a result (a shard may hold no record of a small input).
    if (run.summary.contigs() == 0 && run.shared.empty() && !o.shard.active())
        throw InputError(
            fmt::format("no FASTA records in {}: nothing to decode", join_words(o.inputs)));

    RunInfo info;
    info.profile_name = model.name;
    info.profile_checksum = profile_checksum(profile);
    info.decode_mode = o.decode == DecodeMode::posterior ? "posterior" : "viterbi";
    info.command_line = o.command_line;
    info.inputs = o.inputs;
    info.options = run_options(o, call_options);
    info.soft_masked_unknown = o.soft_masked == SoftMasked::unknown;
    if (o.shard.active())
        info.shard = std::make_shared<const nlohmann::ordered_json>(
            shard_section(shard, *info.options, info.profile_checksum, run.kept, run.shared));
    if (!o.shard.active()) {  // a shard sees part of the input: merge judges the whole
        RepeatedWarning undepleted(log, "records whose CpG is not depleted");
        for (const DepletionWarning& w : run.summary.depletion_warnings())
            undepleted.warn(w.message);
        undepleted.finish();
    }
    write_run_documents(run, info, profile, call_options, clock);
}

}  // namespace tidemark
