// Suggestions for mistyped names: edit distance and the closest candidates.
#include "tidemark/suggest.hpp"

#include <catch2/catch.hpp>

using namespace tidemark;

TEST_CASE("edit distance matches textbook examples") {
    // Levenshtein distance kitten -> sitting is 3 (the standard textbook example, e.g. Wikipedia
    // "Levenshtein distance"); the optimal-string-alignment variant counts an adjacent
    // transposition as one edit (Damerau 1964, Commun. ACM 7:171-176).
    CHECK(edit_distance("kitten", "sitting") == 3);
    CHECK(edit_distance("", "abc") == 3);
    CHECK(edit_distance("abc", "") == 3);
    CHECK(edit_distance("flaw", "lawn") == 2);
    CHECK(edit_distance("scna", "scan") == 1);  // one transposition
    CHECK(edit_distance("ca", "abc") == 3);     // OSA (unrestricted Damerau would give 2)
    // tidemark's folding: case and '-' versus '_'.
    CHECK(edit_distance("cpg_island", "cpg-island") == 0);
    CHECK(edit_distance("Scan", "scan") == 0);
}

TEST_CASE("closest names: typos, prefixes, order") {
    const std::vector<std::string> subcommands = {"scan",     "profiles", "fit",
                                                  "simulate", "compare",  "merge"};
    CHECK(closest_names("scna", subcommands) == std::vector<std::string>{"scan"});
    CHECK(closest_names("prof", subcommands) == std::vector<std::string>{"profiles"});
    CHECK(closest_names("zzzzzz", subcommands).empty());
    CHECK(closest_names("zzzzzz", subcommands, 2, false).size() == 2);
    CHECK(closest_names("scan", subcommands).empty());  // the word itself is no suggestion
    CHECK(did_you_mean("cpg_island", {"cpg-island", "gc-shift", "isochore"}) ==
          "; did you mean 'cpg-island'?");
    CHECK(did_you_mean("xyz", {"cpg-island"}).empty());
    CHECK(did_you_mean("--thread", {"--threads", "--block", "-t"}) ==
          "; did you mean '--threads'?");
}
