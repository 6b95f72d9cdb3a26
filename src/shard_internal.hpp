// Internal: the JSON forms of a ContigSummary and of a split record inside a shard's summary
// (written by scan, read by merge).
#pragma once

#include <nlohmann/json.hpp>
#include <string>

#include "tidemark/shard.hpp"
#include "tidemark/summary.hpp"

namespace tidemark {

using ordered_json = nlohmann::ordered_json;

/// Every field, doubles at full precision (nlohmann writes the shortest text that reads back
/// to the same double).
ordered_json contig_to_json(const ContigSummary& contig);

/// The inverse; throws InputError naming `where`.
ContigSummary contig_from_json(const nlohmann::json& json, const std::string& where);

/// A composition as its six counts [a, c, g, t, unknown, cpg], and back (throws a
/// nlohmann::json exception for another shape).
ordered_json composition_json(const Composition& composition);
Composition composition_from(const nlohmann::json& json);

/// A split record (shard.hpp) and its inverse, every double at full precision.
ordered_json split_record_to_json(const SplitRecord& record);
SplitRecord split_record_from_json(const nlohmann::json& json, const std::string& where);

}  // namespace tidemark
