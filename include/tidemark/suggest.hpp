// Suggestions for mistyped names (subcommands, options, profiles, sequence names): the closest
// candidates by edit distance.
#pragma once

#include <string>
#include <vector>

namespace tidemark {

/// Edit distance between a and b: insertions, deletions, substitutions and transpositions of
/// adjacent characters each cost 1 (optimal string alignment); letters compare case-insensitively
/// and '-' equals '_'.
size_t edit_distance(const std::string& a, const std::string& b);

/// Up to `limit` candidates, closest first (ties in the candidates' order). With `close_only`,
/// only those a typo away: within max(1, length/3) edits, or which start with the word or the
/// word with them (a prefix).
std::vector<std::string> closest_names(const std::string& word,
                                       const std::vector<std::string>& candidates, size_t limit = 3,
                                       bool close_only = true);

/// "; did you mean 'x'?" or "; did you mean 'x' or 'y'?" for the close candidates, else "".
std::string did_you_mean(const std::string& word, const std::vector<std::string>& candidates);

}  // namespace tidemark
