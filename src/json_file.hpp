// Internal: reading a JSON file written by another tidemark step (shard summaries and reports,
// seams files, E-step statistics), with errors that name the file.
#pragma once

#include <fmt/format.h>

#include <nlohmann/json.hpp>
#include <string>

#include "tidemark/error.hpp"

namespace tidemark {

/// The bytes of a file; throws InputError "PATH: cannot open" (followed by " " + what when
/// what is given, e.g. "the seams file").
std::string read_text_file(const std::string& path, const std::string& what = "");

/// The file parsed as JSON (nlohmann::json or nlohmann::ordered_json); throws InputError
/// naming the file when it cannot be opened (see read_text_file) or is not JSON.
template <typename Json = nlohmann::ordered_json>
Json read_json_file(const std::string& path, const std::string& what = "") {
    const std::string text = read_text_file(path, what);
    try {
        return Json::parse(text);
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: not JSON: {}", path, e.what()));
    }
}

}  // namespace tidemark
