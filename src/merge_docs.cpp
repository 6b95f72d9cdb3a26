// Merge, step 1: the shards' summaries and reports, read and checked to come from one run.
#include <fmt/format.h>

#include <algorithm>
#include <fstream>
#include <sstream>

#include "json_file.hpp"
#include "merge_internal.hpp"
#include "summary_internal.hpp"
#include "tidemark/error.hpp"

namespace tidemark::merging {

ShardDoc read_doc(const std::string& path, const char* format) {
    ShardDoc d;
    d.path = path;
    d.doc = read_json_file(path);
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
            for (const auto& r : s.at("shared")) d.split.push_back(split_record_from_json(r, path));
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
    for (const char* key : {"format", "tool_version", "inputs", "profile", "profile_crc32",
                            "options", "decode", "soft_masked"})
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

// The parts of a Model the summary writer reads: region names and which are reported, and for
// contig screening (ForeignContigRule) a window profile's min_known, which the shard summaries
// record with their (empty or partial) foreign_contigs lists.
Model region_model(const ordered_json& doc) {
    Model m;
    m.name = doc.value("profile", "");
    for (const auto& [name, r] : doc["genome"]["regions"].items()) {
        m.region_names.push_back(name);
        m.region_report.push_back(r.value("reported", false));
    }
    if (doc.contains("foreign_contigs")) {
        m.window_min_known = doc["foreign_contigs"].value("min_known_bases", int64_t{1});
        m.viewed_window = m.window_min_known;  // any positive size: a window profile's view
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
    if (doc.contains("options")) info.options = run_options_from_json(doc["options"], "options");
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

// The records each shard decoded, as (input index, name): its whole records and the shared
// records it has a part of. Its chrom sizes and bigWig sequence lists name exactly these.
std::vector<std::vector<std::pair<int64_t, std::string>>> shard_records(
    const std::vector<ShardDoc>& docs) {
    std::vector<std::vector<std::pair<int64_t, std::string>>> out(docs.size());
    for (size_t k = 0; k < docs.size(); ++k) {
        for (const ContigSummary& c : docs[k].contigs) out[k].emplace_back(c.input_index, c.name);
        for (const SplitRecord& r : docs[k].split)
            out[k].emplace_back(r.whole.input_index, r.whole.name);
        std::sort(out[k].begin(), out[k].end());
    }
    return out;
}

std::string shard_label(const ShardDoc& d) {
    return fmt::format("shard {}/{} ({})", d.index, d.count, d.path);
}

}  // namespace tidemark::merging
