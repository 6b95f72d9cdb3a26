// Records split between shards: seams files (scan --emit-seams / --seams) and the per-segment
// sink states a shard records for merge, with their JSON forms.
#include <fmt/format.h>
#include <sys/stat.h>

#include <algorithm>
#include <fstream>
#include <limits>
#include <sstream>

#include "json_file.hpp"
#include "shard_internal.hpp"
#include "tidemark/error.hpp"
#include "tidemark/shard.hpp"

namespace tidemark {
namespace {

constexpr const char* seams_format = "tidemark-seams/1";

ordered_json group_json(const IntervalCaller::Group& g) {
    return {g.begin, g.end, g.sum, g.min, g.core_begin, g.core_end, g.confident};
}

IntervalCaller::Group group_from(const nlohmann::json& j) {
    IntervalCaller::Group g;
    g.begin = j.at(0).get<int64_t>();
    g.end = j.at(1).get<int64_t>();
    g.sum = j.at(2).get<double>();
    g.min = j.at(3).get<double>();
    g.core_begin = j.at(4).get<int64_t>();
    g.core_end = j.at(5).get<int64_t>();
    g.confident = j.at(6).get<int64_t>();
    return g;
}

bool cpg_straddles(const Contig& contig, int64_t position) {
    return position > 0 && position < contig.length && contig.base(position - 1) == 1 &&
           contig.base(position) == 2;
}

}  // namespace

ordered_json composition_json(const Composition& k) {
    return {k.a, k.c, k.g, k.t, k.unknown, k.cpg};
}

Composition composition_from(const nlohmann::json& j) {
    const auto k = j.get<std::vector<int64_t>>();
    if (k.size() != 6)
        throw nlohmann::json::other_error::create(501, "a composition needs 6 counts", nullptr);
    return Composition{k[0], k[1], k[2], k[3], k[4], k[5]};
}

std::string seams_identity(const std::vector<std::string>& inputs,
                           const std::vector<std::string>& regions, const std::string& regions_bed,
                           const std::string& profile_crc32, int64_t block, int64_t bin,
                           int64_t segment_length) {
    ordered_json j;
    j["inputs"] = inputs;
    // Size and modification time: seams from before a change to a file are refused.
    ordered_json stamps = ordered_json::array();
    for (const auto& in : inputs) {
        struct stat st {};
        if (stat(in.c_str(), &st) == 0)
            stamps.push_back({static_cast<int64_t>(st.st_size),
                              static_cast<int64_t>(st.st_mtim.tv_sec),
                              static_cast<int64_t>(st.st_mtim.tv_nsec)});
        else
            stamps.push_back(nullptr);
    }
    j["input_stamps"] = stamps;
    j["regions"] = regions;
    j["regions_bed"] = regions_bed;
    j["profile_crc32"] = profile_crc32;
    j["block"] = block;
    j["bin"] = bin;
    j["segment_length"] = segment_length;
    return j.dump();
}

std::vector<SeamsRecord> compute_seams(ShardFilter& shard, PosteriorDecoder& decoder,
                                       const std::vector<std::string>& inputs,
                                       const std::vector<Region>& regions, TaskPool* pool) {
    std::vector<SeamsRecord> records;
    if (!shard.has_pieces())
        return records;  // nothing to read: this shard decodes only whole records
    for (const auto& input : inputs) {
        std::unique_ptr<SequenceSource> source = shard.open(input, regions, true);
        Contig contig;
        while (source->next(contig)) {
            if (!shard.take(contig) || !shard.split()) continue;
            SeamsRecord r;
            r.input_index = shard.record_index();
            r.name = contig.name;
            r.length = contig.length;
            r.segments = shard.segments();
            for (const ShardPiece& piece : shard.my_pieces()) {
                std::vector<SegmentSeam> part =
                    decoder.seams(contig, piece.first, piece.last, pool);
                for (size_t k = piece.first; k < piece.last; ++k) r.indexes.push_back(k);
                for (auto& seam : part) r.seams.push_back(std::move(seam));
            }
            records.push_back(std::move(r));
        }
    }
    shard.finish();
    return records;
}

std::string seams_json(const ShardSpec& spec, const std::string& identity,
                       const std::vector<SeamsRecord>& records) {
    ordered_json doc;
    doc["format"] = seams_format;
    doc["shard"] = {{"index", spec.index}, {"count", spec.count}};
    doc["identity"] = ordered_json::parse(identity);
    ordered_json list = ordered_json::array();
    for (const auto& r : records) {
        ordered_json o;
        o["input_index"] = r.input_index;
        o["name"] = r.name;
        o["length"] = r.length;
        o["segments"] = r.segments;
        ordered_json seams = ordered_json::array();
        for (size_t k = 0; k < r.seams.size(); ++k) {
            const SegmentSeam& s = r.seams[k];
            // Doubles are written as the shortest text that reads back to the same value.
            seams.push_back({{"segment", r.indexes.at(k)},
                             {"begin", s.begin},
                             {"end", s.end},
                             {"exponent", s.exponent},
                             {"product", s.product},
                             {"bases_crc32", s.bases_crc32},
                             {"marks", s.marks}});
        }
        o["seams"] = seams;
        list.push_back(o);
    }
    doc["records"] = list;
    return doc.dump() + "\n";
}

SeamsTable::SeamsTable(const std::vector<std::string>& paths, const std::string& identity,
                       const ShardSpec& spec)
    : paths_(paths) {
    const nlohmann::json want = nlohmann::json::parse(identity);
    for (const auto& path : paths) {
        const nlohmann::json doc = read_json_file<nlohmann::json>(path, "the seams file");
        if (!doc.is_object() || doc.value("format", "") != seams_format)
            throw InputError(fmt::format("{}: not a {} file (written by scan --emit-seams)", path,
                                         seams_format));
        try {
            if (doc.at("shard").at("count").get<int>() != spec.count || doc.at("identity") != want)
                throw InputError(fmt::format(
                    "{}: these seams come from another run (inputs or their contents, profile, "
                    "--block, --bin or shard count "
                    "differ); run scan --emit-seams again with the same options for every shard",
                    path));
            for (const auto& r : doc.at("records")) {
                const int64_t index = r.at("input_index").get<int64_t>();
                auto it = std::find_if(records_.begin(), records_.end(),
                                       [&](const auto& e) { return e.first == index; });
                if (it == records_.end()) {
                    Entry e;
                    e.name = r.at("name").get<std::string>();
                    e.length = r.at("length").get<int64_t>();
                    e.segments = r.at("segments").get<size_t>();
                    e.seams.resize(e.segments);
                    e.have.assign(e.segments, false);
                    records_.emplace_back(index, std::move(e));
                    it = records_.end() - 1;
                }
                Entry& e = it->second;
                if (e.name != r.at("name").get<std::string>() ||
                    e.segments != r.at("segments").get<size_t>())
                    throw InputError(fmt::format("{}: record {} differs from the other seams files",
                                                 path, index + 1));
                for (const auto& s : r.at("seams")) {
                    const size_t k = s.at("segment").get<size_t>();
                    if (k >= e.segments || e.have[k])
                        throw InputError(
                            fmt::format("{}: record '{}' segment {} is out of range or given twice",
                                        path, e.name, k + 1));
                    e.have[k] = true;
                    // Marks serve only the shard that made them (step 2 of the same shard).
                    const bool own = doc.at("shard").at("index").get<int>() == spec.index;
                    e.seams[k] = SegmentSeam{
                        s.at("begin").get<int64_t>(),
                        s.at("end").get<int64_t>(),
                        s.at("product").get<std::vector<double>>(),
                        s.at("exponent").get<int64_t>(),
                        own ? s.at("marks").get<std::vector<double>>() : std::vector<double>{},
                        s.at("bases_crc32").get<uint32_t>()};
                }
            }
        } catch (const nlohmann::json::exception& e) {
            throw InputError(fmt::format("{}: malformed seams file: {}", path, e.what()));
        }
    }
}

std::vector<SegmentSeam> SeamsTable::record(int64_t input_index, const std::string& name,
                                            int64_t length, size_t segments) const {
    const auto it = std::find_if(records_.begin(), records_.end(),
                                 [&](const auto& e) { return e.first == input_index; });
    if (it == records_.end())
        throw InputError(fmt::format(
            "record '{}' is shared between shards, but no seams file given has it; pass the seams "
            "files of every shard (scan --emit-seams) with --seams",
            name));
    const Entry& e = it->second;
    if (e.name != name || e.length != length || e.segments != segments)
        throw InputError(
            fmt::format("record {} is '{}' ({} bp) in the seams files but '{}' ({} bp) here",
                        input_index + 1, e.name, e.length, name, length));
    std::string missing;
    for (size_t k = 0; k < e.segments; ++k)
        if (!e.have[k]) missing += (missing.empty() ? "" : ", ") + std::to_string(k + 1);
    if (!missing.empty())
        throw InputError(
            fmt::format("record '{}': no seams for segments {} of {}; pass the seams files of "
                        "every shard with --seams",
                        name, missing, e.segments));
    return e.seams;
}

SplitSegment describe_segment(const Contig& contig, size_t index, int64_t begin, int64_t end,
                              const IntervalCaller& caller, const RegionTotals& totals) {
    SplitSegment s;
    s.index = index;
    s.begin = begin;
    s.end = end;
    s.lanes = caller.lanes();
    s.calls = caller.calls();
    s.expected = totals.expected_bases();
    std::vector<int64_t> at = {begin, end};
    for (const auto& lane : s.lanes) {
        if (!lane.seen) continue;
        for (const auto* g : {&lane.first, &lane.open})
            for (const int64_t p : {g->begin, g->end})
                if (p >= begin && p <= end) at.push_back(p);
    }
    std::sort(at.begin(), at.end());
    at.erase(std::unique(at.begin(), at.end()), at.end());
    // One pass over the segment: the composition between consecutive prefix positions, accumulated
    // (with the CpG that straddles each intermediate mark).
    Composition prefix;
    int64_t from = begin;
    for (const int64_t p : at) {
        if (p > from) {
            if (from > begin && cpg_straddles(contig, from)) ++prefix.cpg;
            prefix += composition(contig, from, p);
            from = p;
        }
        s.prefixes.push_back({p, prefix, cpg_straddles(contig, p)});
    }
    return s;
}

ordered_json split_record_to_json(const SplitRecord& r) {
    ordered_json o;
    o["record"] = contig_to_json(r.whole);
    o["full_length"] = r.full_length;
    o["segments"] = r.segments;
    ordered_json done = ordered_json::array();
    for (const auto& s : r.done) {
        ordered_json d;
        d["segment"] = s.index;
        d["begin"] = s.begin;
        d["end"] = s.end;
        ordered_json lanes = ordered_json::array();
        for (const auto& l : s.lanes)
            lanes.push_back({l.seen, l.has_first, group_json(l.first), l.active, group_json(l.open),
                             l.lead_sum, l.lead_min, l.gap_sum, l.gap_min, l.lead_gap});
        d["lanes"] = lanes;
        ordered_json calls = ordered_json::array();
        for (const auto& c : s.calls)
            calls.push_back({c.begin, c.end, c.region, c.mean_posterior, c.min_posterior,
                             c.core_begin, c.core_end, composition_json(c.composition),
                             c.confident_bases});
        d["calls"] = calls;
        d["expected"] = s.expected;
        ordered_json prefixes = ordered_json::array();
        for (const auto& m : s.prefixes)
            prefixes.push_back({m.position, composition_json(m.prefix), m.cpg_before});
        d["marks"] = prefixes;
        done.push_back(d);
    }
    o["done"] = done;
    return o;
}

SplitRecord split_record_from_json(const nlohmann::json& j, const std::string& where) {
    SplitRecord r;
    try {
        r.whole = contig_from_json(j.at("record"), where);
        r.full_length = j.at("full_length").get<int64_t>();
        r.segments = j.at("segments").get<size_t>();
        for (const auto& d : j.at("done")) {
            SplitSegment s;
            s.index = d.at("segment").get<size_t>();
            s.begin = d.at("begin").get<int64_t>();
            s.end = d.at("end").get<int64_t>();
            for (const auto& l : d.at("lanes")) {
                IntervalCaller::Lane lane;
                lane.seen = l.at(0).get<bool>();
                lane.has_first = l.at(1).get<bool>();
                lane.first = group_from(l.at(2));
                lane.active = l.at(3).get<bool>();
                lane.open = group_from(l.at(4));
                lane.lead_sum = l.at(5).get<double>();
                lane.lead_min = l.at(6).get<double>();
                lane.gap_sum = l.at(7).get<double>();
                lane.gap_min = l.at(8).get<double>();
                lane.lead_gap = l.at(9).get<bool>();
                s.lanes.push_back(lane);
            }
            for (const auto& c : d.at("calls")) {
                Call call;
                call.begin = c.at(0).get<int64_t>();
                call.end = c.at(1).get<int64_t>();
                call.region = c.at(2).get<int>();
                call.mean_posterior = c.at(3).get<double>();
                call.min_posterior = c.at(4).get<double>();
                call.core_begin = c.at(5).get<int64_t>();
                call.core_end = c.at(6).get<int64_t>();
                call.composition = composition_from(c.at(7));
                call.confident_bases = c.at(8).get<int64_t>();
                s.calls.push_back(call);
            }
            s.expected = d.at("expected").get<std::vector<double>>();
            for (const auto& m : d.at("marks"))
                s.prefixes.push_back(
                    {m.at(0).get<int64_t>(), composition_from(m.at(1)), m.at(2).get<bool>()});
            r.done.push_back(std::move(s));
        }
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: malformed shared record: {}", where, e.what()));
    }
    return r;
}

}  // namespace tidemark
