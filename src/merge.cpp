// Merge: shard summaries and reports -> the run's contigs in input order -> summary and report;
// shard BED and bedGraph files streamed back into input order.
#include "tidemark/merge.hpp"

#include <fmt/format.h>
#include <htslib/bgzf.h>
#include <htslib/kstring.h>
#include <sys/stat.h>

#include <algorithm>
#include <fstream>
#include <memory>
#include <sstream>

#include "shard_internal.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/summary.hpp"

namespace tidemark {
namespace {

// One shard's summary or report.
struct ShardDoc {
    std::string path;
    ordered_json doc;
    int index = 0, count = 0;
    int64_t records = 0;
    std::vector<ContigSummary> contigs;  ///< this shard's, in its (input) order
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
         {"format", "tool_version", "inputs", "profile", "profile_crc32", "options", "decode"})
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

// (shard position in the given order, contig position in that shard) of every record, in input
// order.
std::vector<std::pair<size_t, size_t>> input_order(const std::vector<ShardDoc>& docs) {
    std::vector<std::pair<size_t, size_t>> order(static_cast<size_t>(docs.at(0).records),
                                                 {SIZE_MAX, 0});
    std::vector<bool> seen_shard(static_cast<size_t>(docs[0].count) + 1, false);
    for (size_t k = 0; k < docs.size(); ++k) {
        if (seen_shard[static_cast<size_t>(docs[k].index)])
            throw InputError(fmt::format("{}: shard {}/{} is given twice", docs[k].path,
                                         docs[k].index, docs[k].count));
        seen_shard[static_cast<size_t>(docs[k].index)] = true;
        for (size_t j = 0; j < docs[k].contigs.size(); ++j) {
            const int64_t i = docs[k].contigs[j].input_index;
            if (i < 0 || i >= docs[k].records || order[static_cast<size_t>(i)].first != SIZE_MAX)
                throw InputError(fmt::format(
                    "{}: record '{}' (input index {}) is out of range or also in another "
                    "shard; the shards were planned differently",
                    docs[k].path, docs[k].contigs[j].name, i));
            order[static_cast<size_t>(i)] = {k, j};
        }
    }
    for (size_t i = 0; i < order.size(); ++i)
        if (order[i].first == SIZE_MAX)
            throw InputError(fmt::format(
                "record {} of the input is in no shard; the shards were planned differently",
                i + 1));
    return order;
}

std::vector<ContigSummary> merged_contigs(const std::vector<ShardDoc>& docs) {
    std::vector<ContigSummary> all;
    for (const auto& [k, j] : input_order(docs)) all.push_back(docs[k].contigs[j]);
    return all;
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

// Streams the shard files (files[k] belongs to docs[k]) into out in input order. The lines of a
// record are those that follow in its shard's file with its name and coordinates inside it,
// each starting at or after the previous line's end (calls are disjoint, tracks tile).
// Returns the output uncommitted, so that nothing appears unless every merge succeeds.
std::unique_ptr<OutputFile> merge_text(const std::vector<ShardDoc>& docs,
                                       const std::vector<std::string>& files,
                                       const std::string& target, const OutputFormat& base_format) {
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
    for (const auto& [k, j] : input_order(docs)) {
        const ContigSummary& c = docs[k].contigs[j];
        LineReader& r = *readers[k];
        int64_t previous_end = c.offset;
        while (const std::string* line = r.peek()) {
            if (!coordinates(*line, chrom, start, end))
                throw InputError(fmt::format("{}: line {}: expected CHROM<TAB>START<TAB>END...",
                                             r.path(), r.number()));
            if (chrom != c.name || start < previous_end || end > c.offset + c.length) break;
            buffer += *line;
            buffer += '\n';
            previous_end = end;
            r.pop();
            if (buffer.size() > (1 << 20)) {
                out.write(buffer);
                buffer.clear();
            }
        }
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
// IDs (REGION_SERIAL, numbered through the run) are renumbered in that order.
std::unique_ptr<OutputFile> merge_gff3(const std::vector<ShardDoc>& docs,
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
    for (const auto& [k, j] : input_order(docs)) {
        const std::string& block = blocks[k][j];
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
                    throw InputError(fmt::format("{}: feature without a tidemark ID: {}", files[k],
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
    if (o.summary_path.empty() && o.report_path.empty() && o.shard_beds.empty() &&
        o.shard_tracks.empty() && o.shard_gff3.empty())
        throw UsageError(
            "merge has nothing to write: give -o with --shard-beds, --summary, --report or "
            "--posteriors");
}

void run_merge(const MergeOptions& o, const Logger& log) {
    validate(o);
    const std::vector<ShardDoc> summaries = read_docs(o.shard_summaries, "tidemark-summary/1");
    const std::vector<ShardDoc> reports = read_docs(o.shard_reports, "tidemark-report/1");
    // BED and track files follow the order given, so they pair with the documents as given,
    // not as sorted; read_docs keeps the given order.
    const std::vector<ShardDoc>& plan = summaries.empty() ? reports : summaries;
    const std::vector<ContigSummary> contigs = merged_contigs(plan);
    if (!summaries.empty() && !reports.empty()) {
        const std::vector<ContigSummary> other = merged_contigs(reports);
        bool same = other.size() == contigs.size();
        for (size_t i = 0; same && i < other.size(); ++i) same = other[i].name == contigs[i].name;
        if (!same)
            throw InputError(
                "the summaries and the reports list different records; do they come from one run?");
    }
    const Model model = region_model(plan[0].doc);
    warn_on_commands(plan, log);

    std::unique_ptr<OutputFile> summary, report;
    if (!o.summary_path.empty()) {
        summary = std::make_unique<OutputFile>(o.summary_path);
        summary->write(summary_json(run_info(first_shard(plan).doc), model, contigs));
    }
    if (!o.report_path.empty()) {
        report = std::make_unique<OutputFile>(o.report_path);
        report->write(report_json(run_info(first_shard(reports).doc), model,
                                  merged_contigs(reports), summed_resources(reports)));
    }
    OutputFormat format;
    format.bgzip = o.bgzip;
    format.tabix = o.bgzip;
    std::vector<std::unique_ptr<OutputFile>> texts;
    if (!o.shard_beds.empty())
        texts.push_back(merge_text(plan, o.shard_beds, o.output.empty() ? "-" : o.output, format));
    if (!o.shard_gff3.empty()) texts.push_back(merge_gff3(plan, o.shard_gff3, o.gff3_path));
    if (!o.shard_tracks.empty()) {
        for (size_t r = 0; r < model.region_names.size(); ++r) {
            if (!model.region_report[r]) continue;
            std::vector<std::string> files;
            for (const auto& prefix : o.shard_tracks) {
                const std::string base = prefix + "." + model.region_names[r] + ".bedgraph";
                if (exists(base + ".gz"))
                    files.push_back(base + ".gz");
                else if (exists(base))
                    files.push_back(base);
                else
                    throw InputError(fmt::format(
                        "no track {} or {}.gz (merge reads bedGraph tracks; bigWig is not "
                        "merged)",
                        base, base));
            }
            const std::string target = o.tracks_prefix + "." + model.region_names[r] +
                                       (o.bgzip ? ".bedgraph.gz" : ".bedgraph");
            texts.push_back(merge_text(plan, files, target, format));
        }
    }
    for (auto& t : texts) t->commit();
    if (summary) summary->commit();
    if (report) report->commit();
    int64_t bases = 0;
    for (const auto& c : contigs) bases += c.length;
    log.info(
        fmt::format("merge: {} shards, {} records, {} bp", plan.size(), contigs.size(), bases));
}

}  // namespace tidemark
