// Internal: the JSON form of a scan's effective options (RunOptions), written into reports and
// shard summaries and read back by merge.
#pragma once

#include <nlohmann/json.hpp>
#include <string>

#include "tidemark/summary.hpp"

namespace tidemark {

/// The "options" object of a report (and of a shard summary's "shard" object).
nlohmann::ordered_json run_options_json(const RunOptions& options);

/// The inverse. The calling options (min_posterior, merge_gap, min_length, core_posterior,
/// island_criteria, bed_style) must be present; others take their defaults. Throws InputError
/// naming `where` for a malformed object.
RunOptions run_options_from_json(const nlohmann::json& json, const std::string& where);

}  // namespace tidemark
