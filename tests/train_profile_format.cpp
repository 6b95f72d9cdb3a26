// Profile format additions for training: regions[].min_length and states[].tie (parsing,
// validation messages, round trip), and the built-in isochore and gc-shift profiles.
#include <fmt/format.h>

#include <catch2/catch.hpp>

#include "tidemark/error.hpp"
#include "tidemark/train.hpp"

using namespace tidemark;
using Catch::Matchers::Contains;

namespace {

std::string profile_text(const std::string& region_extra, const std::string& state_x_extra,
                         const std::string& state_y_extra,
                         const std::string& y_rows = "[[0.1,0.2,0.3,0.4]]",
                         const std::string& x_row = "{\"x\": 0.5, \"y\": 0.5}") {
    return fmt::format(R"({{
      "format": "tidemark-profile/1", "name": "t",
      "regions": [{{"name": "r", "report": true{}}}, {{"name": "q", "report": false}}],
      "states": [{{"name": "x", "region": "r", "order": 0{}, "emissions": [[0.1,0.2,0.3,0.4]]}},
                 {{"name": "y", "region": "q", "order": 0{}, "emissions": {}}}],
      "initial": {{"x": 1}},
      "transitions": {{"x": {}, "y": {{"y": 1}}}}}})",
                       region_extra, state_x_extra, state_y_extra, y_rows, x_row);
}

}  // namespace

TEST_CASE("min_length and tie parse and survive a round trip", "[train][profile]") {
    const Profile p = parse_profile(
        profile_text(", \"min_length\": 7", ", \"tie\": \"g\"", ", \"tie\": \"g\""), "t");
    CHECK(p.regions[0].min_length == 7);
    CHECK(p.regions[1].min_length == 1);
    CHECK(p.states[0].tie == "g");
    const Profile q = parse_profile(to_json(p), "round trip");
    CHECK(q.regions[0].min_length == 7);
    CHECK(q.states[1].tie == "g");
    CHECK(to_json(q) == to_json(p));
    // Defaults are not written, so files without the new fields stay as they were.
    const Profile plain = parse_profile(profile_text("", "", ""), "t");
    const std::string text = to_json(plain);
    CHECK(text.find("min_length") == text.rfind("min_length"));  // only calling.min_length
    CHECK(to_json(plain).find("\"tie\"") == std::string::npos);
}

TEST_CASE("min_length and tie are validated with messages naming the field", "[train][profile]") {
    CHECK_THROWS_WITH(parse_profile(profile_text(", \"min_length\": 0", "", ""), "f.json"),
                      Contains("f.json: regions[0].min_length: must be from 1 to 2048"));
    CHECK_THROWS_WITH(parse_profile(profile_text(", \"min_length\": 2.5", "", ""), "f.json"),
                      Contains("regions[0].min_length: must be a non-negative integer"));
    CHECK_THROWS_WITH(
        parse_profile(
            profile_text(", \"min_length\": 4", "", "", "[[0.1,0.2,0.3,0.4]]", "{\"y\": 1}"),
            "f.json"),
        Contains("transitions.x: region 'r' has min_length 4 but state 'x' has no transition"));
    CHECK_THROWS_WITH(parse_profile(profile_text(", \"min_length\": 2048", "", ""), "f.json"),
                      Contains("expand the model to 2049 states"));
    CHECK_NOTHROW(parse_profile(profile_text(", \"min_length\": 2000", "", ""), "f.json").regions);
    CHECK_THROWS_WITH(parse_profile(profile_text("", ", \"tie\": \"g\"", ", \"tie\": \"g\"",
                                                 "[[0.4,0.3,0.2,0.1]]"),
                                    "f.json"),
                      Contains("tie group 'g': emissions[0][0] is 0.4 here but 0.1 in 'x'"));
    CHECK_THROWS_WITH(parse_profile(profile_text("", ", \"tie\": \"\"", ""), "f.json"),
                      Contains("states[0] ('x').tie: must not be empty"));
    CHECK_THROWS_WITH(parse_profile(profile_text(", \"min_lenght\": 3", "", ""), "f.json"),
                      Contains("did you mean 'min_length'?"));
}

TEST_CASE("Built-in profiles parse, compile and are listed with a description",
          "[train][profile]") {
    for (const char* name : {"cpg-island", "isochore", "gc-shift"}) {
        INFO(name);
        const Profile p = load_profile(name);
        CHECK_FALSE(p.description.empty());
        CHECK(p.description.find('\n') == std::string::npos);
        CHECK_FALSE(p.sources.empty());
        CHECK_NOTHROW(compile(p));
    }
}

TEST_CASE("isochore families emit GC inside their borders", "[train][profile]") {
    // Borders L1 < 37 %, L2 37-41 %, H1 41-46 %, H2 46-53 %, H3 > 53 % of Costantini, Clay, Auletta
    // & Bernardi (2006), "An isochore map of human chromosomes", Genome Res. 16:536-541 (written
    // down from memory in shared/REFERENCES.md).
    const Profile p = load_profile("isochore");
    const std::vector<std::pair<std::string, std::pair<double, double>>> borders = {
        {"L1", {0.0, 0.37}},
        {"L2", {0.37, 0.41}},
        {"H1", {0.41, 0.46}},
        {"H2", {0.46, 0.53}},
        {"H3", {0.53, 1.0}}};
    for (const auto& [family, range] : borders) {
        const int s = p.state_index(family);
        REQUIRE(s >= 0);
        REQUIRE(p.windowed());
        const double gc = p.states[s].gc.mean;
        INFO(family << " GC " << gc);
        CHECK(gc > range.first);
        CHECK(gc < range.second);
        // Expected domain length (the min_length chain, then a geometric number of windows) of
        // hundreds of kb: isochores are "typically much longer than 300 kb" (same source).
        const double stay = p.transitions[s][s];
        const double windows =
            static_cast<double>(p.chain_length(p.states[s].region)) + 1 / (1 - stay);
        CHECK(windows * static_cast<double>(p.window_size) >= 300000);
    }
}
