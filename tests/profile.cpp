// Profile parsing and validation (field-level errors), the built-in cpg-island-2state numbers
// against the published tables, canonical JSON round trip, and compilation.
#include "tidemark/profile.hpp"

#include <catch2/catch.hpp>
#include <nlohmann/json.hpp>

#include "test_util.hpp"
#include "tidemark/error.hpp"

using namespace tidemark;
using json = nlohmann::json;

namespace {

json minimal() {
    return json::parse(R"({
      "format": "tidemark-profile/1", "name": "t",
      "regions": [{"name": "hot", "report": true}, {"name": "cold", "report": false}],
      "states": [
        {"name": "h", "region": "hot", "order": 0, "emissions": [[0.1, 0.4, 0.4, 0.1]]},
        {"name": "c", "region": "cold", "order": 1,
         "emissions": [[0.25,0.25,0.25,0.25],[0.3,0.2,0.2,0.3],[0.25,0.25,0.25,0.25],[0.4,0.1,0.1,0.4]]}],
      "initial": {"h": 0.5, "c": 0.5},
      "transitions": {"h": {"h": 0.9, "c": 0.1}, "c": {"c": 0.99, "h": 0.01}}
    })");
}

std::string error_for(const json& doc) {
    try {
        parse_profile(doc.dump(), "p.json");
    } catch (const ProfileError& e) {
        return e.what();
    }
    return "";
}

}  // namespace

TEST_CASE("a minimal profile parses and compiles", "[profile]") {
    const Profile p = parse_profile(minimal().dump(), "p.json");
    CHECK(p.states.size() == 2);
    CHECK(p.transitions[1][0] == 0.01);
    const Model m = compile(p);
    CHECK(m.max_order == 1);
    // mean row of state c: column means of its four rows (derived by hand)
    CHECK(m.emission_prob(1, 0, 0, base_a) == Approx((0.25 + 0.3 + 0.25 + 0.4) / 4));
    // full context: preceding base T (code 3) selects row 3
    CHECK(m.emission_prob(1, 3, 5, base_t) == Approx(0.4));
    // order 0 ignores the context
    CHECK(m.emission_prob(0, 3, 0, base_c) == Approx(0.4));
    // transitions absent from the file are zero, present ones kept
    CHECK(m.transitions[0 * 2 + 1] == 0.1);
    CHECK(m.in_begin.back() == 4);
}

TEST_CASE("validation names the offending field", "[profile]") {
    struct Case {
        std::function<void(json&)> edit;
        std::string fragment;
    };
    const std::vector<Case> cases = {
        {[](json& d) { d["format"] = "other/2"; }, "format: 'other/2' is not supported"},
        {[](json& d) { d.erase("initial"); }, "missing required field 'initial'"},
        {[](json& d) { d["transitons"] = d["transitions"]; },
         "unknown field 'transitons' (did you mean 'transitions'?)"},
        {[](json& d) { d["states"][0]["emissions"][0][1] = 0.5; },
         "states[0] ('h').emissions[0]: probabilities sum to 1.1"},
        {[](json& d) { d["states"][0]["emissions"][0][0] = -0.1; }, "negative"},
        {[](json& d) { d["states"][0]["emissions"][0][0] = "x"; }, "must be a number"},
        {[](json& d) { d["states"][1]["order"] = 6; }, "order: must be an integer from 0 to 5"},
        {[](json& d) { d["states"][1]["emissions"].erase(0); },
         "emissions: must be an array of 4 rows (4^order)"},
        {[](json& d) { d["states"][0]["region"] = "warm"; }, "names unknown region 'warm'"},
        {[](json& d) { d["regions"][0]["report"] = false; }, "no region has \"report\": true"},
        {[](json& d) { d["transitions"]["h"]["x"] = 0.0; }, "names unknown target state 'x'"},
        {[](json& d) { d["transitions"]["q"] = json::object(); }, "names unknown state 'q'"},
        {[](json& d) { d["transitions"]["c"]["c"] = 0.5; },
         "transitions.c: probabilities sum to 0.51"},
        {[](json& d) { d["initial"]["h"] = 0.7; }, "initial: probabilities sum to 1.2"},
        {[](json& d) { d["states"][1]["name"] = "h"; }, "duplicate state name"},
        {[](json& d) {
             d["regions"].push_back({{"name", "idle"}, {"report", false}});
         },
         "('idle'): has no state"},
    };
    for (const auto& c : cases) {
        json doc = minimal();
        c.edit(doc);
        const std::string msg = error_for(doc);
        INFO(msg);
        CHECK(msg.rfind("p.json: ", 0) == 0);
        CHECK(msg.find(c.fragment) != std::string::npos);
    }
    CHECK(error_for(json::parse("[1]")).find("must be a JSON object") != std::string::npos);
    try {
        parse_profile("{\"format\": ", "broken.json");
        FAIL("no error");
    } catch (const ProfileError& e) {
        CHECK(std::string(e.what()).find("broken.json: invalid JSON") != std::string::npos);
    }
}

TEST_CASE("a NaN in a profile is rejected", "[profile]") {
    // JSON has no NaN literal; nlohmann rejects it as a parse error, which we report.
    std::string text = minimal().dump();
    text.replace(text.find("0.1,0.4"), 3, "NaN");
    CHECK_THROWS_AS(parse_profile(text, "p.json"), ProfileError);
}

TEST_CASE("built-in cpg-island-2state carries the published first-order tables", "[profile]") {
    // Durbin, Eddy, Krogh & Mitchison (1998), Biological Sequence Analysis, section 3.1: the
    // '+' and '-' tables as printed (row = preceding base A C G T, column = next base).
    const double plus[4][4] = {{0.180, 0.274, 0.426, 0.120},
                               {0.171, 0.368, 0.274, 0.188},
                               {0.161, 0.339, 0.375, 0.125},
                               {0.079, 0.355, 0.384, 0.182}};
    const double minus[4][4] = {{0.300, 0.205, 0.285, 0.210},
                                {0.322, 0.298, 0.078, 0.302},
                                {0.248, 0.246, 0.298, 0.208},
                                {0.177, 0.239, 0.292, 0.292}};
    const Profile p = load_profile("cpg-island-2state");
    const int island = p.state_index("island");
    const int bulk = p.state_index("bulk");
    REQUIRE(island >= 0);
    REQUIRE(bulk >= 0);
    for (int a = 0; a < 4; ++a)
        for (int b = 0; b < 4; ++b) {
            // The printed '+' row C sums to 1.001 and is stored renormalised.
            const double expected_plus = a == 1 ? plus[a][b] / 1.001 : plus[a][b];
            CHECK(p.states[island].emissions[a][b] == Approx(expected_plus).margin(1e-9));
            CHECK(p.states[bulk].emissions[a][b] == Approx(minus[a][b]).margin(1e-12));
        }
    // The book's log-odds row C, log2(a+/a-) in bits: -0.913 0.302 1.812 -0.685; from the
    // rounded tables it agrees within 0.006.
    const double log_odds_c[4] = {-0.913, 0.302, 1.812, -0.685};
    for (int b = 0; b < 4; ++b)
        CHECK(std::log2(p.states[island].emissions[1][b] / p.states[bulk].emissions[1][b]) ==
              Approx(log_odds_c[b]).margin(0.006));
    CHECK(p.regions[p.states[island].region].report);
    CHECK_FALSE(p.regions[p.states[bulk].region].report);
}

TEST_CASE("every built-in parses, and canonical JSON round-trips", "[profile]") {
    REQUIRE_FALSE(builtin_profiles().empty());
    for (const auto& b : builtin_profiles()) {
        INFO(b.name);
        const Profile p = parse_profile(b.json, std::string(b.name));
        CHECK(p.name == b.name);
        CHECK_FALSE(p.sources.empty());  // every built-in says where its numbers come from
        const Profile q = parse_profile(to_json(p), "round trip");
        CHECK(to_json(q) == to_json(p));
        CHECK(q.transitions == p.transitions);
        CHECK(q.initial == p.initial);
    }
}

TEST_CASE("load_profile: built-in name, file path, or a clear error", "[profile]") {
    test::TempFile f(minimal().dump(), ".json");
    CHECK(load_profile(f.path()).name == "t");
    try {
        load_profile("no-such-profile");
        FAIL("no error");
    } catch (const ProfileError& e) {
        CHECK(std::string(e.what()).find("cpg-island") != std::string::npos);  // lists built-ins
    }
}
