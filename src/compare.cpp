// Scoring calls against truth: per-type merging, base-level and interval-level metrics, output.
#include "tidemark/compare.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <limits>
#include <map>
#include <nlohmann/json.hpp>
#include <set>
#include <unordered_map>
#include <unordered_set>

#include "byte_source.hpp"
#include "median.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/progress.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {
namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

struct Span {
    int64_t begin = 0, end = 0;
};
using Spans = std::vector<Span>;               // sorted, disjoint, non-touching
using ByChrom = std::map<std::string, Spans>;  // std::map: deterministic order
using ByType = std::map<std::string, ByChrom>;

std::string display(const std::string& path) {
    return path == "-" ? "<stdin>" : path;
}

ByType normalise(const IntervalSet& set, const CompareOptions& o,
                 const std::optional<Genome>& genome, FileNormalisation& report) {
    report.path = set.path;
    report.intervals = static_cast<int64_t>(set.intervals.size());
    std::unordered_map<std::string, int64_t> sizes;
    if (genome)
        for (const auto& c : genome->chroms) sizes.emplace(c.name, c.length);
    ByType out;
    std::map<std::pair<std::string, std::string>, int64_t> last_begin;
    for (const Interval& iv : set.intervals) {
        const std::string where = fmt::format("{}:{}", display(set.path), iv.line);
        const std::string& type = o.name.empty() ? iv.name : o.name;
        if (type.empty())
            throw InputError(
                fmt::format("{}: no region type in column 4; give --name TYPE to score every "
                            "interval as one type",
                            where));
        if (genome) {
            const auto it = sizes.find(iv.chrom);
            if (it == sizes.end())
                throw InputError(fmt::format("{}: contig '{}' is not in the genome file {}", where,
                                             iv.chrom, display(genome->path)));
            if (iv.end > it->second)
                throw InputError(
                    fmt::format("{}: end {} is beyond the length {} of '{}' in the genome file {}",
                                where, iv.end, it->second, iv.chrom, display(genome->path)));
        }
        if (iv.begin == iv.end) {
            ++report.empty;
            continue;
        }
        auto [slot, fresh] = last_begin.try_emplace({type, iv.chrom}, iv.begin);
        if (!fresh) {
            if (iv.begin < slot->second) report.sorted = false;
            slot->second = iv.begin;
        }
        out[type][iv.chrom].push_back({iv.begin, iv.end});
    }
    for (auto& [type, chroms] : out)
        for (auto& [chrom, spans] : chroms) {
            std::sort(spans.begin(), spans.end(), [](const Span& a, const Span& b) {
                return a.begin != b.begin ? a.begin < b.begin : a.end < b.end;
            });
            size_t w = 0;
            for (size_t r = 1; r < spans.size(); ++r) {
                if (spans[r].begin <=
                    spans[w].end) {  // overlapping or touching: one run of the type
                    spans[w].end = std::max(spans[w].end, spans[r].end);
                    ++report.merged;
                } else {
                    spans[++w] = spans[r];
                }
            }
            spans.resize(spans.empty() ? 0 : w + 1);
        }
    return out;
}

int64_t total_length(const ByChrom& chroms) {
    int64_t n = 0;
    for (const auto& [chrom, spans] : chroms)
        for (const Span& s : spans) n += s.end - s.begin;
    return n;
}

int64_t overlap(const Span& a, const Span& b) {
    return std::max<int64_t>(0, std::min(a.end, b.end) - std::max(a.begin, b.begin));
}

bool reciprocal(const Span& a, const Span& b, int64_t ov) {
    return 2 * ov >= a.end - a.begin && 2 * ov >= b.end - b.begin;
}

int64_t intersection(const Spans& a, const Spans& b) {
    int64_t n = 0;
    size_t i = 0, j = 0;
    while (i < a.size() && j < b.size()) {
        n += overlap(a[i], b[j]);
        if (a[i].end < b[j].end)
            ++i;
        else
            ++j;
    }
    return n;
}

// For each interval of `a`, whether some interval of `b` overlaps it and whether one does
// reciprocally; for truth intervals also the offsets to the best reciprocal partner.
struct Hits {
    int64_t any = 0, recip = 0;
};
Hits hits(const Spans& a, const Spans& b, std::vector<int64_t>* start_offsets,
          std::vector<int64_t>* end_offsets) {
    Hits h;
    size_t j = 0;
    for (const Span& x : a) {
        while (j < b.size() && b[j].end <= x.begin) ++j;  // both lists disjoint and sorted
        bool any = false;
        int64_t best = 0;
        const Span* partner = nullptr;
        for (size_t k = j; k < b.size() && b[k].begin < x.end; ++k) {
            const int64_t ov = overlap(x, b[k]);
            if (ov <= 0) continue;
            any = true;
            if (reciprocal(x, b[k], ov) && ov > best) {
                best = ov;
                partner = &b[k];
            }
        }
        h.any += any;
        if (partner) {
            ++h.recip;
            if (start_offsets) start_offsets->push_back(std::abs(partner->begin - x.begin));
            if (end_offsets) end_offsets->push_back(std::abs(partner->end - x.end));
        }
    }
    return h;
}

double ratio(int64_t num, int64_t den) {
    return den > 0 ? static_cast<double>(num) / static_cast<double>(den) : nan;
}

std::string fmt_ratio(double v) {
    return std::isnan(v) ? "NA" : fmt::format("{:.4f}", v);
}

std::string fmt_number(double v) {
    if (std::isnan(v)) return "NA";
    if (v == std::floor(v)) return fmt::format("{}", static_cast<int64_t>(v));
    return fmt::format("{:.1f}", v);
}

// The first `left` columns (names) left-aligned, numbers right-aligned, two spaces between.
std::string aligned(const std::vector<std::vector<std::string>>& rows, size_t left = 1) {
    std::vector<size_t> width;
    for (const auto& row : rows)
        for (size_t c = 0; c < row.size(); ++c) {
            if (width.size() <= c) width.push_back(0);
            width[c] = std::max(width[c], row[c].size());
        }
    std::string out;
    for (const auto& row : rows) {
        std::string line;
        for (size_t c = 0; c < row.size(); ++c) {
            if (c) line += "  ";
            const std::string pad(width[c] - row[c].size(), ' ');
            line += c < left ? row[c] + pad : pad + row[c];
        }
        while (!line.empty() && line.back() == ' ') line.pop_back();
        out += line + '\n';
    }
    return out;
}

int64_t parse_length(const std::string& field, const std::string& where) {
    int64_t v = 0;
    const auto [ptr, ec] = std::from_chars(field.data(), field.data() + field.size(), v);
    if (ec != std::errc() || ptr != field.data() + field.size() || field.empty())
        throw InputError(fmt::format("{}: length '{}' is not an integer", where, field));
    if (v < 0) throw InputError(fmt::format("{}: length {} is negative", where, v));
    return v;
}

void add_chrom(Genome& g, std::unordered_set<std::string>& seen, std::string name, int64_t length,
               const std::string& where) {
    if (!seen.insert(name).second)
        throw InputError(
            fmt::format("{}: duplicate sequence name '{}' in the genome file", where, name));
    g.chroms.push_back({std::move(name), length});
}

void parse_sizes_line(const std::string& line, const std::string& where, Genome& g,
                      std::unordered_set<std::string>& seen) {
    if (line.empty() || line[0] == '#') return;
    const size_t a = line.find_first_of(" \t");
    if (a == std::string::npos || a == 0)
        throw InputError(fmt::format(
            "{}: expected NAME and LENGTH separated by a tab (chrom sizes or .fai)", where));
    const size_t b = line.find_first_not_of(" \t", a);
    const size_t e = b == std::string::npos ? std::string::npos : line.find_first_of(" \t", b);
    if (b == std::string::npos)
        throw InputError(
            fmt::format("{}: no LENGTH after the name '{}'", where, line.substr(0, a)));
    add_chrom(g, seen, line.substr(0, a),
              parse_length(line.substr(b, e == std::string::npos ? e : e - b), where), where);
}

}  // namespace

Genome read_genome(const std::string& path) {
    Genome g;
    g.path = path;
    std::unordered_set<std::string> seen;
    auto source = detail::open_byte_source(path);
    std::vector<char> buf(1 << 16);
    size_t got = source->read(buf.data(), buf.size());
    size_t first = 0;
    while (first < got && (buf[first] == '\n' || buf[first] == '\r' || buf[first] == ' ')) ++first;
    if (first < got && buf[first] == '>') {
        if (path == "-")
            throw InputError("a FASTA genome cannot be read from stdin; give a file or its .fai");
        source.reset();
        auto fasta = open_fasta(path);
        Contig contig;
        while (fasta->next(contig)) add_chrom(g, seen, contig.name, contig.length, display(path));
        return g;
    }
    std::string line;
    int64_t number = 1;
    while (got > 0) {
        for (size_t i = 0; i < got; ++i) {
            if (buf[i] == '\n') {
                if (!line.empty() && line.back() == '\r') line.pop_back();
                parse_sizes_line(line, fmt::format("{}:{}", display(path), number++), g, seen);
                line.clear();
            } else {
                line.push_back(buf[i]);
            }
        }
        got = source->read(buf.data(), buf.size());
    }
    if (!line.empty()) {
        if (line.back() == '\r') line.pop_back();
        parse_sizes_line(line, fmt::format("{}:{}", display(path), number), g, seen);
    }
    if (g.chroms.empty()) throw InputError(display(path) + ": the genome file lists no sequences");
    return g;
}

Comparison compare_intervals(const IntervalSet& calls, const IntervalSet& truth,
                             const CompareOptions& o, const std::optional<Genome>& genome) {
    Comparison result;
    const ByType c = normalise(calls, o, genome, result.calls);
    const ByType t = normalise(truth, o, genome, result.truth);
    result.genome = genome;
    if (genome) {
        int64_t g = 0;
        for (const auto& chrom : genome->chroms) g += chrom.length;
        result.genome_bases = g;
    }

    std::vector<std::string> types = o.types;
    if (types.empty()) {
        std::set<std::string> all;
        for (const auto& [type, chroms] : c) all.insert(type);
        for (const auto& [type, chroms] : t) all.insert(type);
        types.assign(all.begin(), all.end());
    }
    static const ByChrom none;
    for (const std::string& type : types) {
        const auto ci = c.find(type);
        const auto ti = t.find(type);
        const ByChrom& cc = ci == c.end() ? none : ci->second;
        const ByChrom& tc = ti == t.end() ? none : ti->second;
        TypeComparison tcmp;
        tcmp.type = type;

        const int64_t called = total_length(cc), truthful = total_length(tc);
        int64_t tp = 0;
        for (const auto& [chrom, spans] : cc) {
            const auto it = tc.find(chrom);
            if (it != tc.end()) tp += intersection(spans, it->second);
        }
        BaseMetrics& b = tcmp.base;
        b.tp = tp;
        b.fp = called - tp;
        b.fn = truthful - tp;
        b.precision = ratio(tp, tp + b.fp);
        b.recall = ratio(tp, tp + b.fn);
        b.f1 = ratio(2 * tp, 2 * tp + b.fp + b.fn);
        b.jaccard = ratio(tp, tp + b.fp + b.fn);
        if (result.genome_bases) {
            b.tn = *result.genome_bases - (called + truthful - tp);
            b.accuracy = ratio(tp + *b.tn, *result.genome_bases);
        }

        IntervalMetrics& m = tcmp.intervals;
        std::vector<int64_t> starts, ends;
        static const Spans no_spans;
        for (const auto& [chrom, spans] : tc) {
            const auto it = cc.find(chrom);
            const Hits h = hits(spans, it == cc.end() ? no_spans : it->second, &starts, &ends);
            m.truth += static_cast<int64_t>(spans.size());
            m.truth_overlapped += h.any;
            m.truth_reciprocal += h.recip;
        }
        for (const auto& [chrom, spans] : cc) {
            const auto it = tc.find(chrom);
            const Hits h = hits(spans, it == tc.end() ? no_spans : it->second, nullptr, nullptr);
            m.calls += static_cast<int64_t>(spans.size());
            m.calls_overlapping += h.any;
            m.calls_reciprocal += h.recip;
        }
        m.median_start_offset = detail::median_in_place(starts);
        m.median_end_offset = detail::median_in_place(ends);
        result.types.push_back(std::move(tcmp));
    }
    return result;
}

std::string compare_table(const Comparison& r) {
    std::string out;
    std::vector<std::vector<std::string>> rows = {
        {"input", "file", "intervals", "empty", "merged", "sorted"}};
    for (const auto* f : {&r.calls, &r.truth})
        rows.push_back({f == &r.calls ? "calls" : "truth", display(f->path),
                        fmt::format("{}", f->intervals), fmt::format("{}", f->empty),
                        fmt::format("{}", f->merged), f->sorted ? "yes" : "no"});
    out += aligned(rows, 2);
    if (r.genome)
        out += fmt::format("genome {}: {} sequences, {} bases\n", display(r.genome->path),
                           r.genome->chroms.size(), *r.genome_bases);

    out += "\nbase level\n";
    rows = {{"type", "tp", "fp", "fn", "tn", "precision", "recall", "f1", "jaccard", "accuracy"}};
    for (const auto& t : r.types) {
        const BaseMetrics& b = t.base;
        rows.push_back({t.type, fmt::format("{}", b.tp), fmt::format("{}", b.fp),
                        fmt::format("{}", b.fn), b.tn ? fmt::format("{}", *b.tn) : "NA",
                        fmt_ratio(b.precision), fmt_ratio(b.recall), fmt_ratio(b.f1),
                        fmt_ratio(b.jaccard), b.accuracy ? fmt_ratio(*b.accuracy) : "NA"});
    }
    out += aligned(rows);

    out += "\ninterval level (r50 = overlap >= 50% of both intervals)\n";
    rows = {{"type", "truth", "calls", "truth_hit", "truth_hit_r50", "calls_hit", "calls_hit_r50",
             "pairs", "median_start_offset", "median_end_offset"}};
    for (const auto& t : r.types) {
        const IntervalMetrics& m = t.intervals;
        rows.push_back({t.type, fmt::format("{}", m.truth), fmt::format("{}", m.calls),
                        fmt_ratio(ratio(m.truth_overlapped, m.truth)),
                        fmt_ratio(ratio(m.truth_reciprocal, m.truth)),
                        fmt_ratio(ratio(m.calls_overlapping, m.calls)),
                        fmt_ratio(ratio(m.calls_reciprocal, m.calls)),
                        fmt::format("{}", m.truth_reciprocal), fmt_number(m.median_start_offset),
                        fmt_number(m.median_end_offset)});
    }
    out += aligned(rows);
    return out;
}

std::string compare_json(const Comparison& r, const std::string& command_line) {
    using json = nlohmann::ordered_json;
    const auto number = [](double v) { return std::isnan(v) ? json(nullptr) : json(v); };
    const auto file = [](const FileNormalisation& f) {
        return json{{"path", f.path},
                    {"intervals", f.intervals},
                    {"empty", f.empty},
                    {"merged", f.merged},
                    {"sorted", f.sorted}};
    };
    json j;
    j["format"] = "tidemark-compare/1";
    j["version"] = TIDEMARK_VERSION;
    j["command_line"] = command_line;
    j["calls"] = file(r.calls);
    j["truth"] = file(r.truth);
    j["genome"] = r.genome ? json{{"path", r.genome->path},
                                  {"sequences", r.genome->chroms.size()},
                                  {"bases", *r.genome_bases}}
                           : json(nullptr);
    j["types"] = json::array();
    for (const auto& t : r.types) {
        const BaseMetrics& b = t.base;
        const IntervalMetrics& m = t.intervals;
        j["types"].push_back(
            json{{"type", t.type},
                 {"base",
                  {{"tp", b.tp},
                   {"fp", b.fp},
                   {"fn", b.fn},
                   {"tn", b.tn ? json(*b.tn) : json(nullptr)},
                   {"precision", number(b.precision)},
                   {"recall", number(b.recall)},
                   {"f1", number(b.f1)},
                   {"jaccard", number(b.jaccard)},
                   {"accuracy", b.accuracy ? number(*b.accuracy) : json(nullptr)}}},
                 {"intervals",
                  {{"truth", m.truth},
                   {"calls", m.calls},
                   {"truth_overlapped", m.truth_overlapped},
                   {"truth_overlapped_fraction", number(ratio(m.truth_overlapped, m.truth))},
                   {"truth_reciprocal50", m.truth_reciprocal},
                   {"truth_reciprocal50_fraction", number(ratio(m.truth_reciprocal, m.truth))},
                   {"calls_overlapping", m.calls_overlapping},
                   {"calls_overlapping_fraction", number(ratio(m.calls_overlapping, m.calls))},
                   {"calls_reciprocal50", m.calls_reciprocal},
                   {"calls_reciprocal50_fraction", number(ratio(m.calls_reciprocal, m.calls))},
                   {"matched_pairs", m.truth_reciprocal},
                   {"median_abs_start_offset", number(m.median_start_offset)},
                   {"median_abs_end_offset", number(m.median_end_offset)}}}});
    }
    return j.dump(2) + "\n";
}

Comparison run_compare(const CompareJob& job, const Logger& log) {
    if (job.calls == "-" && job.truth == "-")
        throw UsageError("calls and truth cannot both be stdin (-)");
    if (!job.json.empty() && job.json == job.output && job.json != "-" &&
        job.json.rfind("/dev/", 0) != 0)
        throw UsageError("--json and --output name the same file");
    if (job.json == "-" && job.output == "-")
        throw UsageError("--json - and the table both go to stdout; give -o FILE or a JSON file");
    const Stopwatch clock;
    for (const auto& t : job.options.types)
        if (t.empty()) throw UsageError("--type needs a non-empty region type");
    IntervalSet calls{job.calls, read_bed(job.calls)};
    IntervalSet truth{job.truth, read_bed(job.truth)};
    std::optional<Genome> genome;
    if (!job.genome.empty()) genome = read_genome(job.genome);
    const Comparison r = compare_intervals(calls, truth, job.options, genome);

    for (const auto* f : {&r.calls, &r.truth}) {
        if (!f->sorted)
            log.info(fmt::format(
                "{}: intervals were not sorted by start within each contig and type; sorted "
                "before scoring",
                display(f->path)));
        if (f->merged > 0)
            log.info(fmt::format(
                "{}: {} intervals overlapped or touched another of the same type and were "
                "merged into it before scoring",
                display(f->path), f->merged));
        if (f->empty > 0)
            log.info(
                fmt::format("{}: {} zero-length intervals ignored", display(f->path), f->empty));
    }
    std::unique_ptr<OutputFile> json;
    if (!job.json.empty()) {
        json = std::make_unique<OutputFile>(job.json);
        json->write(compare_json(r, job.command_line));
    }
    OutputFile table(job.output);
    table.write(compare_table(r));
    if (json) json->commit();
    table.commit();
    const ResourceUsage usage = clock.now();
    log.detail(fmt::format(
        "compared {} calls with {} truth intervals: {:.2f} s wall, {:.2f} s CPU, peak memory "
        "{:.1f} MiB",
        r.calls.intervals, r.truth.intervals, usage.wall_seconds, usage.cpu_seconds,
        static_cast<double>(usage.peak_rss_bytes) / (1 << 20)));
    return r;
}

}  // namespace tidemark
