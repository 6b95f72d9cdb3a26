// Distributed training: a shard's E-step counts as JSON (fit --emit-stats), and the M-step on
// the summed counts of all shards (fit --from-stats), reusing CountAccumulator and maximise.
#include <fmt/format.h>

#include <algorithm>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "json_file.hpp"
#include "thread_pool.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/shard.hpp"
#include "tidemark/train.hpp"

namespace tidemark {
namespace {

using ordered_json = nlohmann::ordered_json;

constexpr const char* stats_format = "tidemark-stats/1";

// The records of one shard, re-read on every pass like FastaTrainingData. Records longer than
// a share are split between shards as scan splits them (segment_length > 0).
class ShardTrainingData final : public TrainingData {
public:
    ShardTrainingData(const FitJobOptions& o, int64_t segment_length)
        : inner_(o.inputs, o.regions, o.regions_bed, o.soft_masked), inputs_(o.inputs) {
        if (!o.regions.empty() || !o.regions_bed.empty()) {
            const std::vector<Interval> bed =
                o.regions_bed.empty() ? std::vector<Interval>{} : read_bed(o.regions_bed);
            regions_ = resolve_regions(o.inputs[0], o.regions, bed);
        }
        if (o.shard.active()) plan_ = ShardFilter(o.shard, o.inputs, regions_, segment_length);
        plan_.set_soft_masked(o.soft_masked);
    }
    void use_seams(SeamsTable seams) { seams_ = std::move(seams); }
    bool current_is_split() const override { return live_ && live_->split(); }
    SplitRecordPart split_part(const Contig& c) const override {
        if (seams_.empty())
            throw UsageError(
                fmt::format("record '{}' is shared between shards: run fit --emit-seams for every "
                            "shard first and pass the files with --seams",
                            c.name));
        SplitRecordPart part;
        part.segments = live_->segments();
        part.seams = seams_.record(live_->record_index(), c.name, c.length, part.segments);
        for (const ShardPiece& piece : live_->my_pieces())
            part.pieces.emplace_back(piece.first, piece.last);
        return part;
    }
    const std::vector<Region>& regions() const { return regions_; }
    void for_each(const std::function<void(const Contig&)>& fn) override {
        ShardFilter filter = plan_;  // a fresh copy per pass: it counts records
        live_ = &filter;
        ordered_json seen = ordered_json::array();
        const auto take = [&](const Contig& c) {
            if (!filter.take(c)) return;
            // A record shared between shards is listed once, by the shard with its first
            // segment; its unknown bases are known only when this shard read all of it.
            const bool shared = filter.split();
            if (!shared || filter.my_pieces().front().first == 0)
                seen.push_back({{"input_index", filter.record_index()},
                                {"name", c.name},
                                {"offset", c.offset},
                                {"length", c.length},
                                {"unknown", shared && filter.reading_share()
                                                ? ordered_json()
                                                : ordered_json(c.unknown_count())}});
            fn(c);
        };
        if (plan_.spec().active()) {  // through the shard's own source: possibly its records only
            for (const auto& input : inputs_) {
                std::unique_ptr<SequenceSource> source = filter.open(input, regions_);
                while (source->next(contig_)) take(contig_);
            }
        } else {
            inner_.for_each(take);
        }
        live_ = nullptr;
        filter.finish();
        records_ = std::move(seen);
        records_total_ = filter.records();
    }
    const ordered_json& records() const { return records_; }
    const ShardFilter& plan() const { return plan_; }
    int64_t records_total() const { return records_total_; }  ///< of the whole input, last pass

private:
    FastaTrainingData inner_;  ///< the whole input (no --shard)
    std::vector<std::string> inputs_;
    std::vector<Region> regions_;
    Contig contig_;
    ShardFilter plan_;
    const ShardFilter* live_ = nullptr;  ///< during for_each
    SeamsTable seams_;
    ordered_json records_;
    int64_t records_total_ = 0;
};

}  // namespace

std::string counts_to_json(const TrainingCounts& c) {
    ordered_json o;
    o["initial"] = c.initial;
    o["transitions"] = c.transitions;
    o["chain_steps"] = c.chain_steps;
    ordered_json em = ordered_json::array();
    for (const auto& rows : c.emissions) {
        ordered_json r = ordered_json::array();
        for (const auto& row : rows) r.push_back({row[0], row[1], row[2], row[3]});
        em.push_back(r);
    }
    o["emissions"] = em;
    if (!c.windows.empty()) {
        ordered_json windows = ordered_json::array();
        for (const auto& t : c.windows) {
            ordered_json row = {t.gc, t.known, t.weight};
            if (!t.kmers.empty()) row.push_back(t.kmers);  // signature profiles
            windows.push_back(std::move(row));
        }
        o["windows"] = windows;
    }
    o["log_likelihood"] = c.log_likelihood;
    o["positions"] = c.positions;
    o["known"] = c.known;
    o["contigs"] = c.contigs;
    return o.dump();
}

TrainingCounts counts_from_json(const std::string& text, const Profile& profile,
                                const std::string& where) {
    TrainingCounts c = TrainingCounts::zero(profile);
    const size_t P = profile.states.size();
    const auto bad = [&](const std::string& what) {
        return InputError(
            fmt::format("{}: counts do not fit profile '{}': {}", where, profile.name, what));
    };
    try {
        const nlohmann::json j = nlohmann::json::parse(text);
        const auto initial = j.at("initial").get<std::vector<double>>();
        const auto transitions = j.at("transitions").get<std::vector<std::vector<double>>>();
        const auto chain = j.at("chain_steps").get<std::vector<double>>();
        if (initial.size() != P || transitions.size() != P || chain.size() != P)
            throw bad("state count");
        c.initial = initial;
        c.chain_steps = chain;
        for (size_t s = 0; s < P; ++s) {
            if (transitions[s].size() != P) throw bad("transition row size");
            c.transitions[s] = transitions[s];
        }
        const auto& em = j.at("emissions");
        if (em.size() != P) throw bad("emission tables");
        for (size_t s = 0; s < P; ++s) {
            if (em[s].size() != c.emissions[s].size())
                throw bad("emission rows of state " + profile.states[s].name);
            for (size_t r = 0; r < c.emissions[s].size(); ++r) {
                const auto row = em[s][r].get<std::vector<double>>();
                if (row.size() != 4) throw bad("an emission row needs 4 counts");
                std::copy(row.begin(), row.end(), c.emissions[s][r].begin());
            }
        }
        if (j.contains("windows"))
            for (const auto& t : j.at("windows")) {
                WindowTally tally{t.at(0).get<int64_t>(),
                                  t.at(1).get<int64_t>(),
                                  t.at(2).get<std::vector<double>>(),
                                  {}};
                if (tally.weight.size() != P) throw bad("window weights");
                const int k = profile.states.front().signature.k;
                if (t.size() > 3) tally.kmers = t.at(3).get<std::vector<uint32_t>>();
                if (tally.kmers.size() != (k > 0 ? size_t{1} << (2 * k) : 0))
                    throw bad("window k-mer counts");
                c.windows.push_back(std::move(tally));
            }
        c.log_likelihood = j.at("log_likelihood").get<double>();
        c.positions = j.at("positions").get<int64_t>();
        c.known = j.at("known").get<int64_t>();
        c.contigs = j.at("contigs").get<int64_t>();
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: malformed counts: {}", where, e.what()));
    }
    return c;
}

void validate_distributed(const FitJobOptions& o) {
    if (!o.emit_stats.empty() && !o.from_stats.empty())
        throw UsageError(
            "--emit-stats (an E-step) and --from-stats (an M-step) are separate runs; give one");
    if ((o.whole_contigs || !o.emit_seams.empty() || !o.seams.empty()) && !o.shard.active())
        throw UsageError("--emit-seams, --seams and --whole-contigs go with --shard I/N");
    if (!o.emit_seams.empty() && (!o.emit_stats.empty() || !o.seams.empty() || o.whole_contigs))
        throw UsageError(
            "--emit-seams is a step of its own: no --emit-stats, --seams or --whole-contigs with "
            "it");
    if (o.shard.active() && o.emit_stats.empty() && o.emit_seams.empty())
        throw UsageError(
            "fit --shard needs --emit-stats: a shard runs one E-step, and fit --from-stats "
            "combines "
            "the shards");
    if (o.classes_min > 0 || !o.labels.empty() || o.init_from_data || o.fit.restarts != 1 ||
        !o.select.empty())
        throw UsageError(
            "--emit-stats/--from-stats run Baum-Welch from a profile: --classes, --labels, "
            "--init-from-data, --restarts and --select are not available");
    if (!(o.fit.pseudocount >= 0) || !std::isfinite(o.fit.pseudocount))
        throw UsageError("--pseudocount must be a finite number >= 0");
    if (o.fit.block_size < 0) throw UsageError("--block must be >= 0");
    if (o.fit.threads < 0) throw UsageError("--threads must be >= 0 (0 = every core)");
    if (!o.emit_stats.empty() || !o.emit_seams.empty()) {
        if (o.inputs.empty()) throw UsageError("--emit-stats needs the FASTA files");
        if (o.profile.empty())
            throw UsageError("--emit-stats needs the profile of this iteration (-p NAME|FILE)");
    } else {
        if (!o.inputs.empty())
            throw UsageError("--from-stats reads counts, not sequences: drop the FASTA files (" +
                             o.inputs[0] + ")");
        if (!o.regions.empty() || !o.regions_bed.empty())
            throw UsageError("--region/--regions-bed belong to the --emit-stats runs");
    }
}

FitResult emit_statistics(const FitJobOptions& o, const Logger& log) {
    const Profile profile = load_profile(o.profile);
    if (profile.is_template)
        throw UsageError(
            fmt::format("profile '{}' is a template, which fit seeds from the whole genome before "
                        "its first E-step; seed it "
                        "once with 'tidemark fit GENOME -p {} --max-iter 0 -o start.json' and "
                        "distribute the E-steps of "
                        "start.json (add --freeze transitions --freeze initial to the M-steps to "
                        "keep the template's switch "
                        "rates, as fit does)",
                        profile.name, profile.name));
    const Model model = compile(profile);
    DecoderOptions decoder_options;
    decoder_options.block_size = o.fit.block_size;
    PosteriorDecoder decoder(model, decoder_options);
    const int64_t segment_length = o.whole_contigs ? 0 : decoder.segment_length();
    ShardTrainingData data(o, segment_length);
    // What the seams depend on, as scan records it (no track bins in training: bin 1).
    const std::string identity =
        seams_identity(o.inputs, o.regions, o.regions_bed, profile_checksum(profile),
                       o.fit.block_size, 1, segment_length);
    if (!o.emit_seams.empty()) {
        OutputFile out(o.emit_seams);
        ShardFilter shard = data.plan();
        const int threads = resolve_threads(o.fit.threads);
        TaskPool pool(threads);
        const std::vector<SeamsRecord> records =
            compute_seams(shard, decoder, o.inputs, data.regions(), threads > 1 ? &pool : nullptr);
        out.write(seams_json(o.shard, identity, records));
        out.commit();
        log.info(fmt::format("fit: shard {}/{}: seams of {} shared records", o.shard.index,
                             o.shard.count, records.size()));
        FitResult r;
        r.profile = profile;
        return r;
    }
    if (data.plan().has_pieces() && o.seams.empty())
        throw UsageError(
            fmt::format("shard {}/{} counts part of a record shared between shards. Such records "
                        "take two steps per "
                        "iteration: first 'fit ... -p PROFILE --shard I/N --emit-seams "
                        "seams.I.json' for every shard I, then "
                        "this command with '--seams seams.1.json --seams seams.2.json ...' (all of "
                        "them); or add "
                        "--whole-contigs to keep every record on one shard",
                        o.shard.index, o.shard.count));
    if (!o.seams.empty()) data.use_seams(SeamsTable(o.seams, identity, o.shard));
    OutputFile out(o.emit_stats);  // fail early on an unwritable path
    const TrainingCounts counts = expected_counts(profile, data, o.fit.block_size, o.fit.threads);

    ordered_json doc;
    doc["format"] = stats_format;
    doc["tool_version"] = TIDEMARK_VERSION;
    doc["command"] = o.command_line;
    doc["inputs"] = o.inputs;
    doc["regions"] = o.regions;
    doc["regions_bed"] = o.regions_bed;
    const ShardFilter& plan = data.plan();
    if (plan.spec().active())
        doc["shard"] = {{"index", plan.spec().index},
                        {"count", plan.spec().count},
                        {"records", data.records_total()},
                        {"bases", plan.shard_bases()},
                        {"total_bases", plan.total_bases()}};
    else  // the whole input as shard 1 of 1
        doc["shard"] = {{"index", 1},
                        {"count", 1},
                        {"records", data.records().size()},
                        {"bases", counts.positions},
                        {"total_bases", counts.positions}};
    doc["profile"] = ordered_json::parse(to_json(profile));
    doc["counts"] = ordered_json::parse(counts_to_json(counts));
    doc["sequences"] = data.records();
    out.write(doc.dump(1) + "\n");
    out.commit();
    log.info(fmt::format("fit: shard {}/{}: E-step over {} records, {} bp, log-likelihood {:.6f}",
                         doc["shard"]["index"].get<int>(), doc["shard"]["count"].get<int>(),
                         data.records().size(), counts.positions, counts.log_likelihood));
    FitResult r;
    r.profile = profile;
    r.log_likelihood = counts.log_likelihood;
    r.known_bases = counts.known;
    r.positions = counts.positions;
    r.contigs = counts.contigs;
    return r;
}

FitResult fit_from_statistics(const FitJobOptions& o, const Logger& log) {
    OutputFile out(o.output);
    struct Stats {
        std::string path;
        ordered_json doc;
        int index = 0;
    };
    std::vector<Stats> files;
    for (const auto& path : o.from_stats) {
        Stats s{path, read_json_file(path), 0};
        if (!s.doc.is_object() || s.doc.value("format", "") != stats_format)
            throw InputError(
                fmt::format("{}: not a {} file (written by fit --emit-stats)", path, stats_format));
        s.index = s.doc["shard"].value("index", 0);
        files.push_back(std::move(s));
    }
    // A fixed summation order (by shard), whatever order the files were given in.
    std::stable_sort(files.begin(), files.end(),
                     [](const Stats& a, const Stats& b) { return a.index < b.index; });
    const ordered_json& first = files[0].doc;
    const int count = first["shard"].value("count", 0);
    for (size_t k = 0; k < files.size(); ++k) {
        const ordered_json& d = files[k].doc;
        for (const char* key : {"tool_version", "inputs", "regions", "regions_bed", "profile"})
            if (d.value(key, ordered_json()) != first.value(key, ordered_json()))
                throw InputError(
                    fmt::format("{} and {} differ in '{}': they are not shards of one E-step",
                                files[0].path, files[k].path, key));
        if (d["shard"].value("count", 0) != count ||
            d["shard"].value("records", -1) != first["shard"].value("records", -1))
            throw InputError(
                fmt::format("{} and {}: different shard plans", files[0].path, files[k].path));
        if (files[k].index != static_cast<int>(k) + 1)
            throw InputError(fmt::format("statistics of shard {} of {} are {}", k + 1, count,
                                         k > 0 && files[k].index == files[k - 1].index
                                             ? "given twice (" + files[k].path + ")"
                                             : std::string("missing")));
    }
    if (static_cast<int>(files.size()) != count)
        throw InputError(
            fmt::format("{} statistics files given for {} shards (missing shards from {})",
                        files.size(), count, files.size() + 1));

    const Profile current = parse_profile(first["profile"].dump(), files[0].path + " (profile)");
    const Profile structure = o.profile.empty() ? current : load_profile(o.profile);
    TrainingCounts total = TrainingCounts::zero(current);
    for (const auto& f : files)
        total.add(counts_from_json(f.doc["counts"].dump(), current, f.path));
    if (total.known == 0)
        throw InputError("the training sequences contain no known base (A, C, G or T)");
    const FreezeMask freeze = resolve_freeze(o.fit.freeze, structure);
    Profile p = maximise(structure, current, total, freeze, MStepOptions{o.fit.pseudocount});

    // Named as fit names the result of the same start, whatever the iteration.
    const std::string start_name = structure.name;
    p.name = o.name.empty() ? fitted_profile_name(start_name, true) : o.name;
    std::vector<std::string> sources = {fmt::format(
        "Parameters fitted by tidemark {} fit (distributed Baum-Welch, {} shards) to the sequences "
        "listed under provenance, starting from profile '{}'.",
        TIDEMARK_VERSION, count, start_name)};
    for (const auto& s : structure.sources)
        if (s.rfind("Parameters fitted by tidemark", 0) != 0)
            sources.push_back("Starting profile '" + start_name + "': " + s);
    p.sources = sources;

    ordered_json prov;
    prov["tool"] = std::string("tidemark ") + TIDEMARK_VERSION;
    prov["command_line"] = o.command_line;
    prov["method"] = "baum-welch-distributed";
    prov["start"] = start_name;
    prov["shards"] = count;
    prov["inputs"] = first["inputs"];
    ordered_json sequences = ordered_json::array();
    for (const auto& f : files)
        for (const auto& s : f.doc["sequences"]) sequences.push_back(s);
    std::stable_sort(sequences.begin(), sequences.end(),
                     [](const ordered_json& a, const ordered_json& b) {
                         return a["input_index"].get<int64_t>() < b["input_index"].get<int64_t>();
                     });
    prov["sequences_total"] = sequences.size();
    prov["options"] = {{"pseudocount", o.fit.pseudocount}};
    prov["known_bases"] = total.known;
    // The E-step's log-likelihood is that of the profile the shards used, not of the result.
    prov["input_log_likelihood"] = total.log_likelihood;
    p.provenance_json = prov.dump();
    const std::string text = to_json(p);
    parse_profile(text, "fitted profile");
    out.write(text);
    out.commit();
    log.info(fmt::format(
        "fit: wrote {}: 1 iteration (M-step from {} shards; convergence is judged across "
        "iterations by the caller), {} known bases, log-likelihood of the input profile {:.6f}",
        o.output == "-" ? "standard output" : o.output, count, total.known, total.log_likelihood));
    FitResult r;
    r.profile = p;
    r.log_likelihood = total.log_likelihood;
    r.known_bases = total.known;
    r.positions = total.positions;
    r.contigs = total.contigs;
    r.iterations = 1;
    return r;
}

}  // namespace tidemark
