// Sharding: record lengths (faidx or one pass), the shard plan (longest-first assignment, split
// records cut into pieces), the record filter that reads a shard's share, and the "shard" object
// of a shard's summary (every ContigSummary at full precision, which merge reads back).
#include "tidemark/shard.hpp"

#include <fmt/format.h>
#include <htslib/bgzf.h>
#include <sys/stat.h>

#include <algorithm>
#include <cmath>
#include <numeric>
#include <unordered_map>

#include "fai_index.hpp"
#include "shard_internal.hpp"
#include "summary_internal.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/track.hpp"

namespace tidemark {
namespace {

using detail::FaiEntry;
using detail::read_fai;

constexpr int max_shards = 100000;

bool parse_int(const std::string& s, int& out) {
    if (s.empty() || s.size() > 6 ||
        !std::all_of(s.begin(), s.end(), [](char c) { return c >= '0' && c <= '9'; }))
        return false;
    out = std::stoi(s);
    return true;
}

// True when the index lists every record of PATH, so that a shard may read only its own records
// through the index: the bytes between one record's sequence and the next one's hold exactly one
// header line (an empty record, which faidx leaves out, adds another), and only line ends follow
// the last record. Reads just those bytes. Sets the units' starts and layouts.
bool index_lists_every_record(const std::string& path, const std::vector<FaiEntry>& entries,
                              std::vector<ShardUnit>& units) {
    for (const FaiEntry& e : entries)
        if (!e.has_layout) return false;
    BGZF* fp = bgzf_open(path.c_str(), "r");
    if (!fp) return false;
    const auto close = [&](bool result) {
        bgzf_close(fp);
        return result;
    };
    if (bgzf_compression(fp) == 2 && bgzf_index_load(fp, path.c_str(), ".gzi") != 0)
        return close(false);
    if (bgzf_compression(fp) == 1) return close(false);
    // Lines starting with '>' in [from, to) (to < 0: up to the end, at most 1 MiB); gap_lines
    // counts the line ends there.
    int64_t gap_lines = 0;
    const auto headers_in = [&](int64_t from, int64_t to) -> int {
        const int64_t want = to < 0 ? (int64_t{1} << 20) : to - from;
        if (want < 0 || want > (int64_t{1} << 20) || bgzf_useek(fp, from, SEEK_SET) != 0) return -1;
        std::string bytes(static_cast<size_t>(want), '\0');
        const ssize_t got = bgzf_read(fp, bytes.data(), bytes.size());
        if (got < 0 || (to >= 0 && got != want) || (to < 0 && got == want)) return -1;
        int count = 0;
        gap_lines = 0;
        for (ssize_t i = 0; i < got; ++i) {
            if (bytes[i] == '>' && (i == 0 ? to >= 0 : bytes[i - 1] == '\n'))
                ++count;  // gaps start lines
            else if (to < 0 && i > 0 && bytes[i] != '\n' && bytes[i] != '\r')
                return -1;  // trailing text
            gap_lines +=
                bytes[i] == '\n' || (bytes[i] == '\r' && (i + 1 == got || bytes[i + 1] != '\n'));
        }
        return count;
    };
    if (entries.size() != units.size()) return close(false);
    int64_t end = 0;   // of the previous record's sequence
    int64_t line = 1;  // number of the line that starts at `end`
    for (size_t i = 0; i < entries.size(); ++i) {
        const FaiEntry& e = entries[i];
        if (e.length == 0 || headers_in(end, e.offset) != 1) return close(false);
        units[i].start = RecordStart{end, line};
        units[i].layout = RecordLayout{e.offset, e.line_bases, e.line_bytes};
        const int64_t full = e.length / e.line_bases, rest = e.length % e.line_bases;
        end =
            e.offset + full * e.line_bytes + (rest > 0 ? rest + (e.line_bytes - e.line_bases) : 0);
        line += gap_lines + full + (rest > 0 ? 1 : 0);
    }
    if (entries.empty()) return close(false);
    // The tail, read from the last base (a seek to the very end of a file may fail; the last
    // line may lack its line end).
    const FaiEntry& last = entries.back();
    return close(headers_in(end - (last.line_bytes - last.line_bases) - 1, -1) == 0);
}

// by_index: set when the index lists every record (a shard may then read only its own).
std::vector<ShardUnit> record_lengths(const std::string& path, bool& by_index) {
    by_index = false;
    if (path == "-")
        throw UsageError(
            "--shard needs files: every shard must see the whole input to agree on its share, and "
            "standard input (-) can be read only once");
    const std::string fai = path + ".fai";
    if (ensure_fasta_index(path)) {
        const std::vector<FaiEntry> entries = read_fai(fai);
        std::vector<ShardUnit> units;
        for (const FaiEntry& e : entries) units.push_back({path, e.name, e.length, 0, {}, {}});
        by_index = index_lists_every_record(path, entries, units);
        return units;
    }
    // Plain gzip and the other compressions cannot be indexed: one pass over the records.
    std::vector<ShardUnit> units;
    std::unique_ptr<SequenceSource> source = open_fasta(path);
    Contig contig;
    while (source->next(contig)) units.push_back({path, contig.name, contig.length, 0, {}, {}});
    return units;
}

ordered_json vector_json(const std::vector<double>& v) {
    ordered_json a = ordered_json::array();
    for (double x : v) a.push_back(x);
    return a;
}

template <typename T>
std::vector<T> get_vector(const nlohmann::json& j, const char* key, const std::string& where) {
    if (!j.contains(key) || !j[key].is_array())
        throw InputError(fmt::format("{}: shard record lacks '{}'", where, key));
    std::vector<T> out;
    for (const auto& x : j[key]) {
        if (x.is_null())
            out.push_back(std::numeric_limits<T>::quiet_NaN());
        else
            out.push_back(x.get<T>());
    }
    return out;
}

}  // namespace

ShardSpec parse_shard(const std::string& text) {
    const auto slash = text.find('/');
    ShardSpec s;
    if (slash == std::string::npos || !parse_int(text.substr(0, slash), s.index) ||
        !parse_int(text.substr(slash + 1), s.count) || s.index < 1 || s.index > s.count ||
        s.count > max_shards)
        throw UsageError(
            fmt::format("--shard '{}': expected I/N with 1 <= I <= N <= {} (e.g. --shard 2/8)",
                        text, max_shards));
    return s;
}

std::vector<ShardUnit> list_units(const std::vector<std::string>& inputs,
                                  const std::vector<Region>& regions, bool* by_index) {
    std::vector<ShardUnit> units;
    if (by_index) *by_index = true;
    if (!regions.empty()) {
        for (const auto& r : regions)
            units.push_back({inputs.at(0), r.contig, r.end - r.begin, r.begin, {}, {}});
        return units;
    }
    for (const auto& in : inputs) {
        bool indexed = false;
        std::vector<ShardUnit> more = record_lengths(in, indexed);
        if (by_index) *by_index = *by_index && indexed;
        units.insert(units.end(), std::make_move_iterator(more.begin()),
                     std::make_move_iterator(more.end()));
    }
    return units;
}

std::vector<int> assign_shards(const std::vector<int64_t>& lengths, int count) {
    if (count < 1) throw InternalError("assign_shards: no shards");
    std::vector<size_t> order(lengths.size());
    std::iota(order.begin(), order.end(), size_t{0});
    std::stable_sort(order.begin(), order.end(),
                     [&](size_t a, size_t b) { return lengths[a] > lengths[b]; });
    std::vector<int64_t> load(static_cast<size_t>(count), 0);
    std::vector<int> shard(lengths.size(), 0);
    for (const size_t u : order) {
        const auto least =
            std::min_element(load.begin(), load.end());  // first minimum: lower shard
        shard[u] = static_cast<int>(least - load.begin());
        *least += lengths[u];
    }
    return shard;
}

namespace {

// One shard's records of one input, in input order: whole records parsed from where they start,
// pieces of split records read as windows through the index.
class ShareSource final : public SequenceSource {
public:
    struct Item {
        bool window = false;
        std::string name;
        int64_t length = 0;
        std::vector<RecordWindow> windows;
        RecordLayout layout;
    };
    ShareSource(std::string path, std::vector<Item> items, std::vector<RecordStart> whole)
        : path_(std::move(path)),
          items_(std::move(items)),
          stream_(whole.empty() ? nullptr : open_fasta_records(path_, std::move(whole))) {}
    const std::string& path() const override { return path_; }
    void set_soft_masked(SoftMasked mode) override {
        soft_masked_ = mode;
        if (stream_) stream_->set_soft_masked(mode);
    }
    bool next(Contig& contig) override {
        if (next_ == items_.size()) return false;
        const Item& item = items_[next_++];
        if (!item.window) {
            if (!stream_->next(contig))
                throw InputError(
                    fmt::format("{}: record '{}' is missing where the index says it starts; delete "
                                "the index and rerun every shard",
                                path_, item.name));
            return true;
        }
        read_record_windows(path_, item.name, item.length, item.layout, item.windows, contig,
                            soft_masked_);
        return true;
    }

private:
    std::string path_;
    std::vector<Item> items_;
    std::unique_ptr<SequenceSource> stream_;
    size_t next_ = 0;
};

}  // namespace

ShardPlan plan_shards(std::vector<ShardUnit> units, int count, int64_t segment_length) {
    ShardPlan plan;
    plan.units = std::move(units);
    const size_t n = plan.units.size();
    plan.shard_of.assign(n, -1);
    plan.pieces.assign(n, {});
    int64_t total = 0;
    for (const auto& u : plan.units) total += u.length;
    const int64_t share = count > 0 ? (total + count - 1) / count : total;
    // Items to assign: (unit, piece index or -1 for the whole unit) with their lengths.
    std::vector<std::pair<size_t, int>> items;
    std::vector<int64_t> lengths;
    for (size_t i = 0; i < n; ++i) {
        const int64_t length = plan.units[i].length;
        if (segment_length > 0 && share > 0 && length > share && length > segment_length) {
            const auto segments =
                static_cast<size_t>((length + segment_length - 1) / segment_length);
            const size_t m = std::min(segments, static_cast<size_t>((length + share - 1) / share));
            for (size_t p = 0; p < m; ++p) {
                ShardPiece piece;
                piece.first = p * segments / m;
                piece.last = (p + 1) * segments / m;
                plan.pieces[i].push_back(piece);
                items.emplace_back(i, static_cast<int>(p));
                lengths.push_back(
                    std::min(length, static_cast<int64_t>(piece.last) * segment_length) -
                    static_cast<int64_t>(piece.first) * segment_length);
            }
        } else {
            items.emplace_back(i, -1);
            lengths.push_back(length);
        }
    }
    const std::vector<int> shard = assign_shards(lengths, count);
    for (size_t k = 0; k < items.size(); ++k) {
        const auto [unit, piece] = items[k];
        if (piece < 0)
            plan.shard_of[unit] = shard[k];
        else
            plan.pieces[unit][static_cast<size_t>(piece)].shard = shard[k];
    }
    return plan;
}

ShardFilter::ShardFilter(ShardSpec spec, const std::vector<std::string>& inputs,
                         const std::vector<Region>& regions, int64_t segment_length)
    : spec_(spec), segment_length_(segment_length) {
    if (!spec_.active()) return;
    bool by_index = false;
    plan_ = plan_shards(list_units(inputs, regions, &by_index), spec_.count, segment_length);
    if (regions
            .empty()) {  // names key the outputs: unique across inputs, checked before any output
        std::unordered_map<std::string, const std::string*> first_input;
        for (const auto& u : plan_.units) {
            const auto [at, inserted] = first_input.emplace(u.name, &u.input);
            if (!inserted && *at->second != u.input)
                throw InputError(fmt::format(
                    "{}: record '{}' has the same name as a record of {}; record names must "
                    "be unique across all inputs (outputs name records by name)",
                    u.input, u.name, *at->second));
        }
    }
    read_share_ = by_index;
    for (size_t i = 0; i < plan_.units.size(); ++i) {
        const int64_t length = plan_.units[i].length;
        total_bases_ += length;
        if (plan_.shard_of[i] == spec_.index - 1) shard_bases_ += length;
        for (const auto& p : plan_.pieces[i])
            if (p.shard == spec_.index - 1)
                shard_bases_ += std::min(length, static_cast<int64_t>(p.last) * segment_length) -
                                static_cast<int64_t>(p.first) * segment_length;
    }
}

std::vector<ShardPiece> ShardFilter::my_pieces() const {
    std::vector<ShardPiece> out;
    if (!split()) return out;
    for (const auto& p : plan_.pieces[static_cast<size_t>(current_)])
        if (p.shard == spec_.index - 1) out.push_back(p);
    return out;
}

size_t ShardFilter::segments() const {
    return split() ? plan_.pieces[static_cast<size_t>(current_)].back().last : 1;
}

bool ShardFilter::mine(size_t unit) const {
    const auto& pieces = plan_.pieces[unit];
    if (pieces.empty()) return plan_.shard_of[unit] == spec_.index - 1;
    return std::any_of(pieces.begin(), pieces.end(),
                       [&](const ShardPiece& p) { return p.shard == spec_.index - 1; });
}

bool ShardFilter::has_pieces() const {
    for (size_t i = 0; i < plan_.units.size(); ++i)
        if (!plan_.pieces[i].empty() && mine(i)) return true;
    return false;
}

std::vector<std::string> ShardFilter::split_records() const {
    std::vector<std::string> out;
    for (size_t i = 0; i < plan_.units.size(); ++i)
        if (!plan_.pieces[i].empty())
            out.push_back(fmt::format("'{}' ({} bp, {} pieces)", plan_.units[i].name,
                                      plan_.units[i].length, plan_.pieces[i].size()));
    return out;
}

std::unique_ptr<SequenceSource> ShardFilter::open(const std::string& input,
                                                  const std::vector<Region>& regions,
                                                  bool pieces_only) {
    std::unique_ptr<SequenceSource> source = open_reader(input, regions, pieces_only);
    source->set_soft_masked(soft_masked_);
    return source;
}

std::unique_ptr<SequenceSource> ShardFilter::open_reader(const std::string& input,
                                                         const std::vector<Region>& regions,
                                                         bool pieces_only) {
    if (!spec_.active() || !read_share_) {
        sharing_ = false;
        return regions.empty() ? open_fasta(input) : open_regions(input, regions);
    }
    // Only this shard's units of this input, through the index, in input order.
    sharing_ = true;
    const auto& units = plan_.units;
    const size_t first =
        static_cast<size_t>(std::find_if(units.begin(), units.end(),
                                         [&](const ShardUnit& u) { return u.input == input; }) -
                            units.begin());
    planned_ = first == units.size() ? planned_ : first;
    next_ = static_cast<int64_t>(planned_);
    const auto wanted = [&](size_t i) {
        return mine(i) && (!pieces_only || !plan_.pieces[i].empty());
    };
    if (!regions.empty()) {  // regions: through faidx
        std::vector<Region> share;
        for (size_t i = first; i < units.size() && units[i].input == input; ++i)
            if (wanted(i))
                share.push_back({units[i].name, units[i].begin, units[i].begin + units[i].length});
        return open_regions(input, std::move(share));
    }
    // Whole records are parsed as a stream from where each starts (faidx fetches are slower);
    // of a split record only this shard's segments are read, with a few bases of context.
    std::vector<ShareSource::Item> items;
    std::vector<RecordStart> whole;
    for (size_t i = first; i < units.size() && units[i].input == input; ++i) {
        if (!wanted(i)) continue;
        if (plan_.pieces[i].empty()) {
            items.push_back({false, units[i].name, units[i].length, {}, {}});
            whole.push_back(units[i].start);
            continue;
        }
        ShareSource::Item item{true, units[i].name, units[i].length, {}, units[i].layout};
        // Context before: the emission order's, and enough to see whether an unknown run at the
        // piece's edges is long enough to be left out of tracks (track_gap_min_length), as a
        // single run sees it.
        const int64_t length = units[i].length,
                      context = std::max<int64_t>(max_emission_order + 1, track_gap_min_length);
        for (const ShardPiece& p : plan_.pieces[i]) {
            if (p.shard != spec_.index - 1) continue;
            const int64_t b = static_cast<int64_t>(p.first) * segment_length_;
            const int64_t e = std::min(length, static_cast<int64_t>(p.last) * segment_length_);
            // Bases after the piece too: a CpG may straddle its end, and a gap may continue.
            RecordWindow w{std::max<int64_t>(0, b - context),
                           std::min(length, e + track_gap_min_length), b, e};
            if (!item.windows.empty() && w.begin < item.windows.back().end) {  // adjacent pieces
                item.windows.back().end = w.end;
                item.windows.back().count_end = w.count_end;
            } else {
                item.windows.push_back(w);
            }
        }
        items.push_back(std::move(item));
    }
    return std::make_unique<ShareSource>(input, std::move(items), std::move(whole));
}

bool ShardFilter::take(const Contig& contig) {
    ++next_;
    current_ = -1;
    if (!spec_.active()) return true;
    const auto& units_ = plan_.units;
    if (sharing_) {  // the source gives this shard's units only: skip to the one it gave
        size_t i = planned_;
        while (i < units_.size() &&
               !(units_[i].name == contig.name && units_[i].begin == contig.offset &&
                 units_[i].length == contig.length))
            ++i;
        if (i == units_.size())
            throw InternalError(fmt::format(
                "shard filter: record '{}' read through the index is not planned", contig.name));
        planned_ = i + 1;
        next_ = static_cast<int64_t>(i) + 1;
        current_ = static_cast<int64_t>(i);
        return mine(i);
    }
    const size_t i = planned_;
    if (i < units_.size() && units_[i].name == contig.name) {
        ++planned_;
        current_ = static_cast<int64_t>(i);
        if (units_[i].length != contig.length)
            throw InputError(fmt::format(
                "{}: record '{}' has {} bases, but the shard plan (from {}.fai or a first pass) "
                "says {}; "
                "the index is out of date: delete it and rerun every shard",
                units_[i].input, contig.name, contig.length, units_[i].input, units_[i].length));
        return mine(i);
    }
    // faidx leaves empty records out of its index; they hold no bases, so shard 1 takes them.
    if (contig.length == 0) return spec_.index == 1;
    if (i >= units_.size())
        throw InputError(fmt::format(
            "{}: record '{}' was not in the shard plan ({} records); if the file changed, "
            "delete its .fai index and rerun every shard",
            units_.empty() ? std::string("input") : units_.back().input, contig.name,
            units_.size()));
    throw InputError(
        fmt::format("{}: record {} is '{}', but the shard plan (from {}.fai or a first pass) has "
                    "'{}'; the index is out of date: delete it and rerun every shard",
                    units_[i].input, next_, contig.name, units_[i].input, units_[i].name));
}

void ShardFilter::finish() {
    const auto& units_ = plan_.units;
    if (sharing_) {  // read through the index, which lists every record: all were seen
        planned_ = units_.size();
        next_ = static_cast<int64_t>(units_.size());
        return;
    }
    if (spec_.active() && planned_ != units_.size())
        throw InputError(fmt::format(
            "{}: read {} records but the shard plan has {}; the index is out of date: "
            "delete it and rerun every shard",
            units_.empty() ? std::string("input") : units_.back().input, planned_, units_.size()));
}

ordered_json contig_to_json(const ContigSummary& c) {
    ordered_json o;
    o["input_index"] = c.input_index;
    o["name"] = c.name;
    o["offset"] = c.offset;
    o["length"] = c.length;
    o["unknown"] = c.unknown;
    o["soft_masked"] = c.soft_masked;
    o["composition"] = composition_json(c.composition);
    o["log_likelihood"] = c.log_likelihood;
    if (!std::isnan(c.composition_distance))
        o["composition_screen"] = {c.composition_distance, c.composition_limit};
    o["expected_bases"] = vector_json(c.expected_bases);
    o["called_bases"] = c.called_bases;
    o["calls"] = c.calls;
    o["call_lengths"] = c.call_lengths;
    o["confidence_sum"] = vector_json(c.confidence_sum);
    ordered_json conf = ordered_json::array();
    for (const auto& v : c.call_confidences) conf.push_back(vector_json(v));
    o["call_confidences"] = conf;
    return o;
}

ContigSummary contig_from_json(const nlohmann::json& j, const std::string& where) {
    try {
        ContigSummary c;
        c.input_index = j.at("input_index").get<int64_t>();
        c.name = j.at("name").get<std::string>();
        c.offset = j.at("offset").get<int64_t>();
        c.length = j.at("length").get<int64_t>();
        c.unknown = j.at("unknown").get<int64_t>();
        c.soft_masked = j.at("soft_masked").get<int64_t>();
        c.composition = composition_from(j.at("composition"));
        const auto& ll = j.at("log_likelihood");
        c.log_likelihood =
            ll.is_null() ? std::numeric_limits<double>::quiet_NaN() : ll.get<double>();
        if (j.contains("composition_screen")) {
            c.composition_distance = j["composition_screen"].at(0).get<double>();
            c.composition_limit = j["composition_screen"].at(1).get<double>();
        }
        c.expected_bases = get_vector<double>(j, "expected_bases", where);
        c.called_bases = j.at("called_bases").get<std::vector<int64_t>>();
        c.calls = j.at("calls").get<std::vector<int64_t>>();
        c.call_lengths = j.at("call_lengths").get<std::vector<std::vector<int64_t>>>();
        c.confidence_sum = get_vector<double>(j, "confidence_sum", where);
        for (const auto& v : j.at("call_confidences")) {
            std::vector<double> row;
            for (const auto& x : v)
                row.push_back(x.is_null() ? std::numeric_limits<double>::quiet_NaN()
                                          : x.get<double>());
            c.call_confidences.push_back(std::move(row));
        }
        return c;
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: malformed shard record: {}", where, e.what()));
    }
}

ordered_json shard_section(const ShardFilter& filter, const RunOptions& options,
                           const std::string& profile_crc32,
                           const std::vector<ContigSummary>& contigs,
                           const std::vector<SplitRecord>& shared) {
    ordered_json o;
    o["index"] = filter.spec().index;
    o["count"] = filter.spec().count;
    o["records"] = filter.records();
    o["options"] = run_options_json(options);
    o["profile_crc32"] = profile_crc32;
    o["bases"] = filter.shard_bases();
    o["total_bases"] = filter.total_bases();
    ordered_json list = ordered_json::array();
    for (const auto& c : contigs) list.push_back(contig_to_json(c));
    o["contigs"] = list;
    ordered_json parts = ordered_json::array();
    for (const auto& r : shared) parts.push_back(split_record_to_json(r));
    o["shared"] = parts;
    return o;
}

}  // namespace tidemark
