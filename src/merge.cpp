// Merge: shard summaries and reports -> the run's contigs in input order -> summary and report;
// shard BED, bedGraph, bigWig and chrom-sizes files streamed back into input order.
#include "tidemark/merge.hpp"

#include <fmt/format.h>
#include <htslib/bgzf.h>
#include <htslib/kstring.h>
#include <sys/stat.h>

#include <algorithm>
#include <fstream>
#include <map>
#include <memory>
#include <optional>
#include <set>
#include <sstream>

#include "shard_internal.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/summary.hpp"
#include "tidemark/track.hpp"

namespace tidemark {
namespace {

// One shard's summary or report.
struct ShardDoc {
    std::string path;
    ordered_json doc;
    int index = 0, count = 0;
    int64_t records = 0;
    std::vector<ContigSummary> contigs;  ///< this shard's, in its (input) order
    std::vector<SharedRecord> shared;    ///< its segments of records shared between shards
};

ShardDoc read_doc(const std::string& path, const char* format) {
    std::ifstream in(path);
    if (!in) throw InputError(path + ": cannot open");
    std::stringstream text;
    text << in.rdbuf();
    ShardDoc d;
    d.path = path;
    try {
        d.doc = ordered_json::parse(text.str());
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: not JSON: {}", path, e.what()));
    }
    if (!d.doc.is_object() || d.doc.value("format", "") != format)
        throw InputError(fmt::format("{}: not a {} file", path, format));
    if (!d.doc.contains("shard") || !d.doc["shard"].is_object())
        throw InputError(
            fmt::format("{}: has no 'shard' object; it was not written by scan --shard I/N", path));
    const auto& s = d.doc["shard"];
    try {
        d.index = s.at("index").get<int>();
        d.count = s.at("count").get<int>();
        d.records = s.at("records").get<int64_t>();
        for (const auto& c : s.at("contigs")) d.contigs.push_back(contig_from_json(c, path));
        if (s.contains("shared"))
            for (const auto& r : s.at("shared")) d.shared.push_back(shared_from_json(r, path));
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: malformed 'shard' object: {}", path, e.what()));
    }
    if (d.count < 1 || d.index < 1 || d.index > d.count)
        throw InputError(
            fmt::format("{}: shard {}/{} is not a valid shard", path, d.index, d.count));
    return d;
}

// The parts every shard of one run shares; anything else differing means different runs. The
// command and the track prefix may differ in output names, so they are not compared.
ordered_json run_identity(const ordered_json& doc) {
    ordered_json id;
    for (const char* key :
         {"format", "tool_version", "inputs", "profile", "profile_crc32", "options", "decode", "soft_masked"})
        if (doc.contains(key)) id[key] = doc[key];
    if (id.contains("options") && id["options"].is_object()) id["options"].erase("posteriors");
    id["shard_options"] = doc["shard"].value("options", ordered_json::object());
    if (id["shard_options"].is_object()) id["shard_options"].erase("posteriors");
    id["shard_count"] = doc["shard"]["count"];
    id["records"] = doc["shard"]["records"];
    id["regions"] = ordered_json::array();
    for (const auto& [name, r] : doc["genome"]["regions"].items())
        id["regions"].push_back({name, r.value("reported", false)});
    return id;
}

// Reads and checks one kind of shard document; returns them sorted by shard index.
std::vector<ShardDoc> read_docs(const std::vector<std::string>& paths, const char* format) {
    std::vector<ShardDoc> docs;
    for (const auto& p : paths) docs.push_back(read_doc(p, format));
    if (docs.empty()) return docs;
    const ordered_json id = run_identity(docs[0].doc);
    for (const auto& d : docs)
        if (run_identity(d.doc) != id)
            throw InputError(fmt::format(
                "{} and {} come from different runs (command, inputs, profile, options or "
                "shard count differ)",
                docs[0].path, d.path));
    const int n = docs[0].count;
    if (static_cast<int>(docs.size()) != n) {
        std::vector<bool> have(static_cast<size_t>(n) + 1, false);
        for (const auto& d : docs) have[static_cast<size_t>(d.index)] = true;
        std::string missing;
        for (int i = 1; i <= n; ++i)
            if (!have[static_cast<size_t>(i)])
                missing += (missing.empty() ? "" : ", ") + std::to_string(i);
        throw InputError(fmt::format("{} {} files given for a run of {} shards{}", docs.size(),
                                     format, n,
                                     missing.empty() ? "" : " (missing shards: " + missing + ")"));
    }
    return docs;
}

// The document of shard 1: its command and options go into the merged files.
const ShardDoc& first_shard(const std::vector<ShardDoc>& docs) {
    return *std::min_element(docs.begin(), docs.end(), [](const ShardDoc& a, const ShardDoc& b) {
        return a.index < b.index;
    });
}

void warn_on_commands(const std::vector<ShardDoc>& docs, const Logger& log) {
    const ShardDoc& first = first_shard(docs);
    for (const auto& d : docs)
        if (d.doc.value("command", "") != first.doc.value("command", "")) {
            log.warn(fmt::format(
                "the shards' recorded commands differ ({} and {}), probably in output names; the "
                "merged files record shard 1's. For files identical to a single run, run every "
                "shard with the same command apart from --shard (e.g. each in its own folder)",
                first.path, d.path));
            return;
        }
}

// A record shared between shards, put back together: every segment from the shard that
// decoded it, joined in order as a single run joins them.
struct SharedAssembly {
    SharedRecord record;  ///< whole-record fields (log-likelihood from the last segment's shard)
    std::vector<std::pair<size_t, const SharedSegment*>> segments;  ///< (doc, segment) in order
    ContigSummary summary;
    std::vector<Call> calls;
    Contig contig;  ///< name and coordinates only, for formatting
};

// Where each record of the input comes from: a whole record of one shard, or an assembly.
struct Slot {
    size_t doc = SIZE_MAX, index = 0;  ///< docs[doc].contigs[index]
    int shared = -1;                   ///< >= 0: assemblies[shared]
};

// What the calls of shared records need: the profile and the calling options of the run.
struct SharedContext {
    Model model;
    CallOptions calling;
    BedStyle style = BedStyle::plain;
};

// The profile of the run (the shards' own, or --profile), checked against the recorded checksum.
SharedContext shared_context(const ShardDoc& doc, const std::string& profile_override) {
    const ordered_json& opt = doc.doc["shard"]["options"];
    const std::string name = profile_override.empty() ? opt.value("profile", "") : profile_override;
    Profile profile;
    try {
        profile = load_profile(name);
    } catch (const Error& e) {
        throw InputError(fmt::format(
            "{}: records shared between shards need the run's profile to join their calls, and '{}' "
            "cannot be loaded ({}); give it with --profile",
            doc.path, name, e.what()));
    }
    const std::string recorded = doc.doc["shard"].value("profile_crc32", "");
    if (profile_checksum(profile) != recorded)
        throw InputError(fmt::format("{}: profile '{}' is not the one the shards used (checksum {} vs {}); give the "
                                     "run's profile with --profile",
                                     doc.path, name, profile_checksum(profile), recorded));
    SharedContext c{compile(profile), {}, BedStyle::plain};
    try {
        c.calling.min_posterior = opt.at("min_posterior").get<double>();
        c.calling.merge_gap = opt.at("merge_gap").get<int64_t>();
        c.calling.min_length = opt.at("min_length").get<int64_t>();
        c.calling.high_posterior = opt.at("core_posterior").get<double>();
        c.calling.criteria = parse_island_criteria(opt.at("island_criteria").get<std::string>());
        c.style = opt.at("bed_style").get<std::string>() == "browser" ? BedStyle::browser : BedStyle::plain;
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: malformed 'options': {}", doc.path, e.what()));
    }
    return c;
}

// Composition of [begin, end) of a shared record from the segments' prefix marks: with G(p) the
// composition of [0, p), it is G(end) - G(begin) less the CpG straddling begin - 1 and begin.
class MarkedComposition {
public:
    explicit MarkedComposition(const SharedAssembly& a) {
        Composition base;
        for (const auto& [doc, seg] : a.segments) {
            const bool straddle = !seg->marks.empty() && seg->marks.front().cpg_before;
            Composition at_end = base;
            for (const CompositionMark& m : seg->marks) {
                Composition g = base;
                g += m.prefix;
                g.cpg += straddle && m.position > seg->begin ? 1 : 0;
                marks_[m.position] = {g, m.cpg_before};
                if (m.position == seg->end) at_end = g;
            }
            base = at_end;
        }
    }
    Composition operator()(int64_t begin, int64_t end) const {
        const auto b = marks_.find(begin), e = marks_.find(end);
        if (b == marks_.end() || e == marks_.end())
            throw InputError(fmt::format("a call {}-{} of a record shared between shards has no composition mark "
                                         "at its ends; the shard summaries were edited or come from another run",
                                         begin, end));
        Composition c = e->second.first;
        c -= b->second.first;
        if (b->second.second) --c.cpg;
        return c;
    }

private:
    std::map<int64_t, std::pair<Composition, bool>> marks_;
};

// The segments must tile the record in order, and what each holds must lie inside it (calls of
// reported regions, marks from its start to its end); anything else is an edited or foreign file.
void check_segments(const std::vector<ShardDoc>& docs, const SharedAssembly& a, const Model& model) {
    size_t reported = 0;
    for (bool r : model.region_report) reported += r;
    int64_t at = 0;
    for (const auto& entry : a.segments) {
        const size_t doc = entry.first;  // not a structured binding: lambdas capture it (clang 14)
        const SharedSegment* seg = entry.second;
        const auto bad = [&](const char* what) {
            return InputError(fmt::format("{}: record '{}' segment {} ({}-{}): {}; the file was edited or comes "
                                          "from another run",
                                          docs[doc].path, a.record.whole.name, seg->index + 1, seg->begin, seg->end,
                                          what));
        };
        if (seg->begin != at || seg->end <= seg->begin || seg->end > a.record.whole.length)
            throw bad("does not continue the segment before it");
        at = seg->end;
        if (seg->lanes.size() != reported) throw bad("holds another number of reported regions than the profile");
        for (const Call& c : seg->calls)
            if (c.begin < seg->begin || c.end > seg->end || c.begin >= c.end || c.region < 0 ||
                static_cast<size_t>(c.region) >= model.region_names.size() || !model.region_report[c.region])
                throw bad("has a call outside it or of an unreported region");
        if (seg->marks.empty() || seg->marks.front().position != seg->begin || seg->marks.back().position != seg->end)
            throw bad("lacks its composition marks");
        for (size_t m = 1; m < seg->marks.size(); ++m)
            if (seg->marks[m].position <= seg->marks[m - 1].position) throw bad("has composition marks out of order");
    }
    if (at != a.record.whole.length) throw InputError(fmt::format("record '{}': its segments end at {}, not at its "
                                                                  "length {}", a.record.whole.name, at,
                                                                  a.record.whole.length));
}

// Joins the segments' caller and totals states in order, as the single run does.
void join_segments(SharedAssembly& a, const SharedContext& ctx) {
    const Model& model = ctx.model;
    Contig& stub = a.contig;
    stub.name = a.record.whole.name;
    stub.offset = a.record.whole.offset;
    stub.length = a.record.whole.length;
    stub.sequence_length = a.record.full_length;
    IntervalCaller caller(model, ctx.calling);
    caller.use_composition_source(MarkedComposition(a));
    RegionTotals totals(model);
    caller.begin_contig(stub);
    totals.begin_contig(stub);
    for (const auto& [doc, seg] : a.segments) {
        IntervalCaller span(model, ctx.calling);
        span.begin_contig(stub);
        span.restore_span(seg->lanes, seg->calls);
        caller.join(span);
        RegionTotals part(model);
        part.restore_span(seg->expected);
        totals.join(part);
    }
    DecodeResult result;
    result.log_likelihood = a.record.whole.log_likelihood;
    caller.end_contig(stub, result);
    totals.end_contig(stub, result);
    a.calls = caller.calls();
    ContigSummary& s = a.summary;
    s = a.record.whole;
    s.composition = MarkedComposition(a)(0, stub.length);  // the whole record, from every segment
    s.unknown = s.composition.unknown;
    const size_t regions = model.region_names.size();
    s.expected_bases = totals.expected_bases();
    s.reset_calls(regions);
    for (const Call& call : a.calls) s.add_call(call, regions);
}

// Every record of the input, in input order, and the shared records put back together; checks
// that the shards cover every record (and every segment of a shared one) exactly once.
struct MergedRun {
    std::vector<Slot> slots;
    std::vector<SharedAssembly> shared;
    std::vector<ContigSummary> contigs;
    std::optional<SharedContext> context;  ///< when there are shared records
};

MergedRun assemble(const std::vector<ShardDoc>& docs, const std::string& profile_override) {
    MergedRun run;
    run.slots.assign(static_cast<size_t>(docs.at(0).records), Slot{});
    std::vector<bool> seen_shard(static_cast<size_t>(docs[0].count) + 1, false);
    const auto claim = [&](const ShardDoc& d, int64_t i, const std::string& name) -> Slot& {
        if (i < 0 || i >= d.records)
            throw InputError(fmt::format("{}: record '{}' (input index {}) is out of range; the shards were "
                                         "planned differently",
                                         d.path, name, i));
        return run.slots[static_cast<size_t>(i)];
    };
    const auto overlap = [](const ShardDoc& d, const std::string& name, int64_t i) {
        return InputError(fmt::format("{}: record '{}' (input index {}) is also in another shard; the shards were "
                                      "planned differently",
                                      d.path, name, i));
    };
    for (size_t k = 0; k < docs.size(); ++k) {
        const ShardDoc& d = docs[k];
        if (seen_shard[static_cast<size_t>(d.index)])
            throw InputError(fmt::format("{}: shard {}/{} is given twice", d.path, d.index, d.count));
        seen_shard[static_cast<size_t>(d.index)] = true;
        for (size_t j = 0; j < d.contigs.size(); ++j) {
            Slot& slot = claim(d, d.contigs[j].input_index, d.contigs[j].name);
            if (slot.doc != SIZE_MAX || slot.shared >= 0) throw overlap(d, d.contigs[j].name, d.contigs[j].input_index);
            slot.doc = k;
            slot.index = j;
        }
        for (const SharedRecord& r : d.shared) {
            bool created = false;
            Slot& slot = claim(d, r.whole.input_index, r.whole.name);
            if (slot.doc != SIZE_MAX) throw overlap(d, r.whole.name, r.whole.input_index);
            if (slot.shared < 0) {
                created = true;
                slot.shared = static_cast<int>(run.shared.size());
                SharedAssembly a;
                a.record = r;
                a.record.done.clear();
                a.segments.assign(r.segments, {SIZE_MAX, nullptr});
                run.shared.push_back(std::move(a));
            }
            SharedAssembly& a = run.shared[static_cast<size_t>(slot.shared)];
            if (a.record.whole.name != r.whole.name || a.record.segments != r.segments ||
                a.record.whole.length != r.whole.length)
                throw InputError(fmt::format("{}: shared record {} differs from the other shards' ({} vs {})", d.path,
                                             r.whole.input_index + 1, r.whole.name, a.record.whole.name));
            if (!created) a.record.whole.soft_masked += r.whole.soft_masked;  // each shard's share
            for (const SharedSegment& seg : r.done) {
                if (seg.index >= a.segments.size() || a.segments[seg.index].second)
                    throw InputError(fmt::format("{}: record '{}' segment {} is out of range or in another shard too",
                                                 d.path, r.whole.name, seg.index + 1));
                a.segments[seg.index] = {k, &seg};
                if (seg.index + 1 == r.segments) a.record.whole.log_likelihood = r.whole.log_likelihood;
            }
        }
    }
    for (size_t i = 0; i < run.slots.size(); ++i)
        if (run.slots[i].doc == SIZE_MAX && run.slots[i].shared < 0)
            throw InputError(fmt::format(
                "record {} of the input is in no shard; the shards were planned differently", i + 1));
    if (!run.shared.empty()) {
        const SharedContext ctx = shared_context(first_shard(docs), profile_override);
        for (SharedAssembly& a : run.shared) {
            std::string missing;
            for (size_t k = 0; k < a.segments.size(); ++k)
                if (!a.segments[k].second) missing += (missing.empty() ? "" : ", ") + std::to_string(k + 1);
            if (!missing.empty())
                throw InputError(fmt::format("shared record '{}': segments {} of {} are in no shard's file",
                                             a.record.whole.name, missing, a.segments.size()));
            check_segments(docs, a, ctx.model);
            join_segments(a, ctx);
        }
        run.context = ctx;
    }
    for (const Slot& slot : run.slots)
        run.contigs.push_back(slot.shared >= 0 ? run.shared[static_cast<size_t>(slot.shared)].summary
                                               : docs[slot.doc].contigs[slot.index]);
    return run;
}

// The parts of a Model the summary writer reads: region names and which are reported.
Model region_model(const ordered_json& doc) {
    Model m;
    m.name = doc.value("profile", "");
    for (const auto& [name, r] : doc["genome"]["regions"].items()) {
        m.region_names.push_back(name);
        m.region_report.push_back(r.value("reported", false));
    }
    return m;
}

RunInfo run_info(const ordered_json& doc) {
    RunInfo info;
    info.profile_name = doc.value("profile", "");
    info.profile_checksum = doc.value("profile_crc32", "");
    info.decode_mode = doc.value("decode", "");
    info.command_line = doc.value("command", "");
    info.inputs = doc.value("inputs", std::vector<std::string>{});
    if (doc.contains("options")) info.options_json = doc["options"].dump();
    info.soft_masked_unknown = doc.value("soft_masked", "base") == "unknown";
    return info;
}

ResourceUsage summed_resources(const std::vector<ShardDoc>& docs) {
    ResourceUsage u;
    for (const auto& d : docs) {
        const ordered_json r = d.doc.value("resources", ordered_json::object());
        u.wall_seconds += r.value("wall_seconds", 0.0);
        u.cpu_seconds += r.value("cpu_seconds", 0.0);
        u.peak_rss_bytes = std::max(u.peak_rss_bytes, r.value("peak_rss_bytes", int64_t{0}));
    }
    return u;
}

// Lines of a plain or BGZF-compressed text file, with one line of look-ahead.
class LineReader {
public:
    explicit LineReader(std::string path) : path_(std::move(path)) {
        fp_ = bgzf_open(path_.c_str(), "r");
        if (!fp_) throw InputError(path_ + ": cannot open");
    }
    ~LineReader() {
        if (fp_) bgzf_close(fp_);
        free(line_.s);
    }
    LineReader(const LineReader&) = delete;
    LineReader& operator=(const LineReader&) = delete;

    /// The current line without its newline, or nullptr at the end.
    const std::string* peek() {
        if (!have_ && !eof_) {
            const int r = bgzf_getline(fp_, '\n', &line_);
            if (r < -1)
                throw InputError(path_ + ": read error (truncated or corrupt compressed file?)");
            if (r == -1)
                eof_ = true;
            else {
                current_.assign(line_.s, line_.l);
                ++number_;
                have_ = true;
            }
        }
        return have_ ? &current_ : nullptr;
    }
    void pop() { have_ = false; }
    const std::string& path() const { return path_; }
    int64_t number() const { return number_; }

private:
    std::string path_;
    BGZF* fp_ = nullptr;
    kstring_t line_{0, 0, nullptr};
    std::string current_;
    bool have_ = false, eof_ = false;
    int64_t number_ = 0;
};

bool is_command_line(const std::string& line) {
    return line.rfind("#command:", 0) == 0;
}

bool is_header(const std::string& line) {
    return line.empty() || line[0] == '#' || line.rfind("track ", 0) == 0 ||
           line.rfind("browser ", 0) == 0;
}

// chrom, start and end of a BED or bedGraph line; false when the line has no such columns.
bool coordinates(const std::string& line, std::string& chrom, int64_t& start, int64_t& end) {
    const auto t1 = line.find('\t');
    if (t1 == std::string::npos) return false;
    const auto t2 = line.find('\t', t1 + 1);
    if (t2 == std::string::npos) return false;
    auto t3 = line.find('\t', t2 + 1);
    if (t3 == std::string::npos) t3 = line.size();
    chrom.assign(line, 0, t1);
    try {
        start = std::stoll(line.substr(t1 + 1, t2 - t1 - 1));
        end = std::stoll(line.substr(t2 + 1, t3 - t2 - 1));
    } catch (const std::exception&) {
        return false;
    }
    return true;
}

std::string chrom_of(const std::string& line) { return line.substr(0, line.find('\t')); }

// A track line's value: what follows the third tab.
std::string_view value_of(const std::string& line) {
    const size_t third = line.find('\t', line.find('\t', line.find('\t') + 1) + 1);
    return third == std::string::npos ? std::string_view() : std::string_view(line).substr(third);
}

// Streams the shard files (files[k] belongs to docs[k]) into out in input order. The lines of a
// record are those that follow in its shard's file with its name and coordinates inside it,
// each starting at or after the previous line's end (calls are disjoint, tracks tile). Shared
// records: shared_lines (BED: formatted by merge), else (tracks) the lines of each segment from
// the shard that decoded it.
// Returns the output uncommitted, so that nothing appears unless every merge succeeds.
std::unique_ptr<OutputFile> merge_text(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                       const std::vector<std::string>& files,
                                       const std::string& target, const OutputFormat& base_format,
                                       const std::vector<std::string>* shared_lines) {
    std::vector<std::unique_ptr<LineReader>> readers;
    for (const auto& f : files) readers.push_back(std::make_unique<LineReader>(f));
    std::string header, first_compared;
    for (size_t k = 0; k < readers.size(); ++k) {
        std::string h, compared;
        while (const std::string* line = readers[k]->peek()) {
            if (!is_header(*line)) break;
            h += *line + "\n";
            if (!is_command_line(*line)) compared += *line + "\n";
            readers[k]->pop();
        }
        if (docs[k].index == first_shard(docs).index) header = h;
        if (k == 0)
            first_compared = compared;
        else if (compared != first_compared)
            throw InputError(fmt::format(
                "{} and {}: the header lines differ, so the files come from different runs",
                files[0], files[k]));
    }
    OutputFormat format = base_format;
    format.skip_lines =
        header.rfind("track ", 0) == 0 ? 1 : 0;  // as scan: the track line comes first
    auto out_file = std::make_unique<OutputFile>(target, format);
    OutputFile& out = *out_file;
    std::string buffer = header;
    std::string chrom;
    int64_t start = 0, end = 0;
    // Copies the lines of `name` inside [from, to) that follow in r. With stitch, a line that
    // continues the one before (adjacent, same value) extends it instead: a piece of a shared
    // record ends its last run at the piece's end, where a single run may have continued it.
    std::string held;  // stitch mode: the last line, not yet written
    int64_t held_start = 0, held_end = 0;
    const auto flush_held = [&] {
        if (held.empty()) return;
        const size_t third = held.find('\t', held.find('\t', held.find('\t') + 1) + 1);
        buffer += fmt::format("{}\t{}\t{}{}\n", chrom_of(held), held_start, held_end, held.substr(third));
        held.clear();
    };
    const auto copy_lines = [&](LineReader& r, const std::string& name, int64_t from, int64_t to, bool stitch) {
        int64_t previous_end = from;
        while (const std::string* line = r.peek()) {
            if (!coordinates(*line, chrom, start, end))
                throw InputError(fmt::format("{}: line {}: expected CHROM<TAB>START<TAB>END...",
                                             r.path(), r.number()));
            if (chrom != name || start < previous_end || end > to) break;
            previous_end = end;
            if (stitch) {
                if (!held.empty() && held_end == start && value_of(held) == value_of(*line)) {
                    held_end = end;
                } else {
                    flush_held();
                    held = *line;
                    held_start = start;
                    held_end = end;
                }
            } else {
                buffer += *line;
                buffer += '\n';
            }
            r.pop();
            if (buffer.size() > (1 << 20)) {
                out.write(buffer);
                buffer.clear();
            }
        }
    };
    for (const Slot& slot : run.slots) {
        if (slot.shared < 0) {
            const ContigSummary& c = docs[slot.doc].contigs[slot.index];
            copy_lines(*readers[slot.doc], c.name, c.offset, c.offset + c.length, false);
            continue;
        }
        const SharedAssembly& a = run.shared[static_cast<size_t>(slot.shared)];
        if (shared_lines) {
            buffer += (*shared_lines)[static_cast<size_t>(slot.shared)];
            continue;
        }
        // Segments come from the shards that decoded them, in order.
        const int64_t offset = a.record.whole.offset;
        for (size_t k = 0; k < a.segments.size();) {
            size_t next = k + 1;
            while (next < a.segments.size() && a.segments[next].first == a.segments[k].first) ++next;
            copy_lines(*readers[a.segments[k].first], a.record.whole.name, offset + a.segments[k].second->begin,
                       offset + a.segments[next - 1].second->end, true);
            k = next;
        }
        flush_held();
    }
    for (size_t k = 0; k < readers.size(); ++k)
        if (const std::string* line = readers[k]->peek())
            throw InputError(fmt::format(
                "{}: line {} ('{}') belongs to no record of shard {}/{} ({}); give the files "
                "in the same shard order as the summaries",
                files[k], readers[k]->number(), line->substr(0, 60), docs[k].index, docs[k].count,
                docs[k].path));
    out.write(buffer);
    return out_file;
}

// GFF3: after the version line, each record is a ##sequence-region line (one per record, as
// scan writes it) followed by its features. Blocks go back into input order and the feature
// IDs (REGION_SERIAL, numbered through the run) are renumbered in that order. Shared records
// are formatted here.
std::unique_ptr<OutputFile> merge_gff3(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                       const std::vector<std::string>& files,
                                       const std::string& target) {
    std::vector<std::vector<std::string>> blocks(docs.size());
    std::string header;
    for (size_t k = 0; k < files.size(); ++k) {
        LineReader r(files[k]);
        std::string h;
        while (const std::string* line = r.peek()) {
            if (line->rfind("##sequence-region ", 0) == 0) blocks[k].emplace_back();
            if (blocks[k].empty())
                h += *line + "\n";
            else
                blocks[k].back() += *line + "\n";
            r.pop();
        }
        if (k == 0)
            header = h;
        else if (h != header)
            throw InputError(fmt::format("{} and {}: the GFF3 headers differ", files[0], files[k]));
        if (blocks[k].size() != docs[k].contigs.size())
            throw InputError(fmt::format(
                "{}: {} sequence-region blocks but shard {}/{} ({}) has {} records; give the "
                "files in the same shard order as the summaries",
                files[k], blocks[k].size(), docs[k].index, docs[k].count, docs[k].path,
                docs[k].contigs.size()));
    }
    auto out = std::make_unique<OutputFile>(target);
    std::string text = header;
    int64_t serial = 0;
    for (const Slot& slot : run.slots) {
        if (slot.shared >= 0) {  // formatted here, numbered on through the run
            const SharedAssembly& a = run.shared[static_cast<size_t>(slot.shared)];
            text += format_gff3_sequence_region(a.contig);
            for (const Call& call : a.calls) text += format_gff3_feature(run.context->model, a.contig, call, ++serial);
            continue;
        }
        const std::string& block = blocks[slot.doc][slot.index];
        size_t begin = 0;
        while (begin < block.size()) {
            const size_t end = block.find('\n', begin);
            std::string line = block.substr(begin, end - begin);
            begin = end + 1;
            const size_t id = line.find("\tID=");
            if (!line.empty() && line[0] != '#' && id != std::string::npos) {
                const size_t semi = line.find(';', id);
                const size_t underscore = semi == std::string::npos ? semi : line.rfind('_', semi);
                if (semi == std::string::npos || underscore == std::string::npos || underscore < id)
                    throw InputError(fmt::format("{}: feature without a tidemark ID: {}", files[slot.doc],
                                                 line.substr(0, 80)));
                line.replace(underscore + 1, semi - underscore - 1, std::to_string(++serial));
            }
            text += line + "\n";
        }
        if (text.size() > (1 << 20)) {
            out->write(text);
            text.clear();
        }
    }
    out->write(text);
    return out;
}

bool exists(const std::string& path) {
    struct stat st {};
    return stat(path.c_str(), &st) == 0;
}

// The records each shard decoded, as (input index, name): its whole records and the shared
// records it has a part of. Its chrom sizes and bigWig sequence lists name exactly these.
std::vector<std::vector<std::pair<int64_t, std::string>>> shard_records(const std::vector<ShardDoc>& docs) {
    std::vector<std::vector<std::pair<int64_t, std::string>>> out(docs.size());
    for (size_t k = 0; k < docs.size(); ++k) {
        for (const ContigSummary& c : docs[k].contigs) out[k].emplace_back(c.input_index, c.name);
        for (const SharedRecord& r : docs[k].shared) out[k].emplace_back(r.whole.input_index, r.whole.name);
        std::sort(out[k].begin(), out[k].end());
    }
    return out;
}

// The shard whose file gives a record's sequence entry: the record's own, or for a shared
// record the shard of its first segment.
size_t source_doc(const MergedRun& run, const Slot& slot) {
    return slot.shared < 0 ? slot.doc : run.shared[static_cast<size_t>(slot.shared)].segments.at(0).first;
}

std::string record_name(const std::vector<ShardDoc>& docs, const MergedRun& run, const Slot& slot) {
    return slot.shared < 0 ? docs[slot.doc].contigs[slot.index].name
                           : run.shared[static_cast<size_t>(slot.shared)].record.whole.name;
}

std::string shard_label(const ShardDoc& d) { return fmt::format("shard {}/{} ({})", d.index, d.count, d.path); }

// Chrom sizes: scan writes "name<TAB>length" once for each run of records with one name (several
// regions of one sequence), so the merged file walks the records in input order the same way,
// taking each length from a shard that decoded the record.
std::unique_ptr<OutputFile> merge_chrom_sizes(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                              const std::vector<std::string>& files, const std::string& target) {
    const auto records = shard_records(docs);
    std::vector<std::map<std::string, std::string>> lengths(files.size());
    for (size_t k = 0; k < files.size(); ++k) {
        std::set<std::string> names;
        for (const auto& r : records[k]) names.insert(r.second);
        LineReader r(files[k]);
        while (const std::string* line = r.peek()) {
            const size_t tab = line->find('\t');
            const std::string name = line->substr(0, tab);
            const std::string length = tab == std::string::npos ? "" : line->substr(tab + 1);
            if (tab == std::string::npos || name.empty() || length.empty() ||
                length.find_first_not_of("0123456789") != std::string::npos)
                throw InputError(fmt::format("{}: line {}: expected NAME<TAB>LENGTH", files[k], r.number()));
            if (!names.count(name))
                throw InputError(fmt::format(
                    "{}: line {}: '{}' is no record of {}; give the files in the same shard order as the summaries",
                    files[k], r.number(), name, shard_label(docs[k])));
            const auto [at, fresh] = lengths[k].emplace(name, length);
            if (!fresh && at->second != length)
                throw InputError(fmt::format("{}: line {}: '{}' has lengths {} and {}", files[k], r.number(), name,
                                             at->second, length));
            r.pop();
        }
        for (const auto& name : names)
            if (!lengths[k].count(name))
                throw InputError(fmt::format("{}: no line for '{}', a record of {}; was it written by that shard?",
                                             files[k], name, shard_label(docs[k])));
    }
    auto out = std::make_unique<OutputFile>(target);
    std::string text, last;
    bool first = true;
    for (const Slot& slot : run.slots) {
        const std::string name = record_name(docs, run, slot);
        if (!first && name == last) continue;
        first = false;
        last = name;
        text += name + "\t" + lengths[source_doc(run, slot)].at(name) + "\n";
    }
    out->write(text);
    return out;
}

// bigWig tracks: the shards' intervals go through BigWigWriter in input order, which gives the
// single run's file byte for byte (the writer's output depends only on the sequence list and
// the interval stream). A shared record's pieces end their last run at the piece's end, where a
// single run may have continued it, so adjacent equal values across pieces are joined again.
// Returns the writer unclosed: close() writes and commits the file.
std::unique_ptr<BigWigWriter> merge_bigwig(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                           const std::vector<std::string>& files, const std::string& target) {
    const auto records = shard_records(docs);
    std::vector<std::unique_ptr<BigWigReader>> readers;
    for (size_t k = 0; k < files.size(); ++k)  // a shard without records wrote no bigWig
        readers.push_back(records[k].empty() ? nullptr : std::make_unique<BigWigReader>(files[k]));
    std::vector<std::map<std::string, int64_t>> lengths(files.size());
    for (size_t k = 0; k < files.size(); ++k) {
        if (!readers[k]) continue;
        std::set<std::string> names;
        for (const auto& r : records[k]) names.insert(r.second);
        for (const auto& seq : readers[k]->sequences()) {
            if (!names.count(seq.name))
                throw InputError(fmt::format(
                    "{}: sequence '{}' is no record of {}; give the prefixes in the same shard order as the summaries",
                    files[k], seq.name, shard_label(docs[k])));
            lengths[k][seq.name] = seq.length;
        }
        for (const auto& name : names)
            if (!lengths[k].count(name))
                throw InputError(fmt::format("{}: no sequence '{}', a record of {}; was it written by that shard?",
                                             files[k], name, shard_label(docs[k])));
    }
    auto out = std::make_unique<BigWigWriter>(target);
    for (const Slot& slot : run.slots) {
        const std::string name = record_name(docs, run, slot);
        const size_t source = source_doc(run, slot);
        const int64_t length = lengths[source].at(name);
        if (slot.shared >= 0)
            for (const auto& [doc, seg] : run.shared[static_cast<size_t>(slot.shared)].segments)
                if (lengths[doc].at(name) != length)
                    throw InputError(fmt::format("{} and {}: sequence '{}' has lengths {} and {}", files[source],
                                                 files[doc], name, length, lengths[doc].at(name)));
        const int sequence = out->add_sequence(name, length);
        // The intervals of [from, to) in file k must follow in order inside it, as scan writes them
        // (tiling it but for long unknown runs); anything else means a file of another shard or run.
        bool held = false;
        BigWigReader::Interval last;
        const auto copy = [&](size_t k, int64_t from, int64_t to, bool stitch) {
            int64_t at = from;
            readers[k]->intervals(name, from, to, [&](const BigWigReader::Interval& iv) {
                if (iv.start < at || iv.end > to || iv.end <= iv.start)
                    throw InputError(fmt::format(
                        "{}: interval {}:{}-{} (0-based, half-open) does not continue the track of {}:{}-{} at {}; "
                        "the file does not belong to {}",
                        files[k], name, iv.start, iv.end, name, from, to, at, shard_label(docs[k])));
                at = iv.end;
                if (!stitch) {
                    out->add(sequence, iv.start, iv.end, iv.value);
                } else if (held && last.end == iv.start && last.value == iv.value) {
                    last.end = iv.end;
                } else {
                    if (held) out->add(sequence, last.start, last.end, last.value);
                    last = iv;
                    held = true;
                }
            });
        };
        if (slot.shared < 0) {
            const ContigSummary& c = docs[slot.doc].contigs[slot.index];
            copy(slot.doc, c.offset, c.offset + c.length, false);
            continue;
        }
        const SharedAssembly& a = run.shared[static_cast<size_t>(slot.shared)];
        const int64_t offset = a.record.whole.offset;
        for (size_t k = 0; k < a.segments.size();) {  // consecutive segments of one shard: one piece
            size_t next = k + 1;
            while (next < a.segments.size() && a.segments[next].first == a.segments[k].first) ++next;
            copy(a.segments[k].first, offset + a.segments[k].second->begin, offset + a.segments[next - 1].second->end,
                 true);
            k = next;
        }
        if (held) out->add(sequence, last.start, last.end, last.value);
    }
    return out;
}

}  // namespace

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
    for (const DepletionWarning& w : depletion_warnings(model, contigs)) log.warn(w.message);

    std::unique_ptr<OutputFile> summary, report;
    if (!o.summary_path.empty()) {
        summary = std::make_unique<OutputFile>(o.summary_path);
        summary->write(summary_json(run_info(first_shard(plan).doc), model, contigs));
    }
    if (!o.report_path.empty()) {
        report = std::make_unique<OutputFile>(o.report_path);
        report->write(report_json(run_info(first_shard(reports).doc), model,
                                  report_run ? report_run->contigs : contigs, summed_resources(reports)));
    }
    OutputFormat format;
    format.bgzip = o.bgzip;
    format.tabix = o.bgzip;
    if (o.bgzip && !o.shard_beds.empty() && (o.output.empty() || o.output == "-"))
        log.warn(bgzip_to_stdout("-o/--output"));
    std::vector<std::unique_ptr<OutputFile>> texts;
    if (!o.shard_beds.empty()) {
        std::vector<std::string> lines;  // of the shared records
        for (const SharedAssembly& a : run.shared) {
            lines.emplace_back();
            for (const Call& call : a.calls)
                lines.back() += format_bed_line(run.context->style, run.context->model, a.contig, call);
        }
        texts.push_back(merge_text(plan, run, o.shard_beds, o.output.empty() ? "-" : o.output, format, &lines));
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
                if (model.region_report[r] && exists(o.shard_tracks[0] + "." + model.region_names[r] + ".bw"))
                    track_format = "bigwig";
        }
        const bool bigwig = track_format == "bigwig";
        if (bigwig && !run.shared.empty()) {
            const int digits = recorded.is_object() ? recorded.value("posterior_digits", 3) : 3;
            if (digits > 6)
                throw InputError(fmt::format(
                    "{}: the shards wrote bigWig tracks with --posterior-digits {} and share records between "
                    "shards; bigWig stores values as float32, which cannot tell apart some values with more than 6 "
                    "decimals, so the pieces of a shared record cannot be joined exactly as a single run joins "
                    "them. Merge bedGraph tracks instead, or scan with --posterior-digits 6 or fewer, or with "
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
                    if (plan[k].contigs.empty() && plan[k].shared.empty()) {  // wrote no bigWig
                        files.push_back("");
                        continue;
                    }
                    if (!exists(base + ".bw"))
                        throw InputError(fmt::format("no track {}.bw (the shards recorded --track-format bigwig)",
                                                     base));
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
                texts.push_back(
                    merge_text(plan, run, files, target + (o.bgzip ? ".bedgraph.gz" : ".bedgraph"), format, nullptr));
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
    log.info(fmt::format("merge: {} shards, {} records ({} shared between shards), {} bp", plan.size(),
                         contigs.size(), run.shared.size(), bases));
}

}  // namespace tidemark
