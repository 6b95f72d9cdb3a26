// Internal: the JSON form of a ContigSummary inside a shard's summary (written by scan, read by
// merge).
#pragma once

#include <nlohmann/json.hpp>
#include <string>

#include "tidemark/summary.hpp"

namespace tidemark {

using ordered_json = nlohmann::ordered_json;

/// Every field, doubles at full precision (nlohmann writes the shortest text that reads back
/// to the same double).
ordered_json contig_to_json(const ContigSummary& contig);

/// The inverse; throws InputError naming `where`.
ContigSummary contig_from_json(const nlohmann::json& json, const std::string& where);

}  // namespace tidemark
