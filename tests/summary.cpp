// The summary built record by record (SummaryBuilder): the streamed documents have exactly the
// layout of nlohmann::json's own dump(2), except that each record's entry is one line of its
// compact dump() (the library parses them and writes them back byte for byte), also when the
// per-record entries spill from memory into a temporary file; the genome-wide totals are the sums
// of the records, counted here independently.
#include "tidemark/summary.hpp"

#include <algorithm>
#include <catch2/catch.hpp>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "tidemark/profile.hpp"

using namespace tidemark;

namespace {
// nlohmann's dump(2), with every item of "contigs" on one line of compact JSON.
std::string dump_with_compact_records(nlohmann::ordered_json doc) {
    std::string items;
    for (const auto& c : doc["contigs"]) items += (items.empty() ? "" : ",\n    ") + c.dump();
    doc["contigs"] = "@";
    std::string text = doc.dump(2) + "\n";
    const size_t at = text.find("\"@\"");
    return text.replace(at, 3, items.empty() ? "[]" : "[\n    " + items + "\n  ]");
}
}  // namespace
using ordered_json = nlohmann::ordered_json;

namespace {

// Record i of n: lengths, compositions and calls that differ from record to record.
ContigSummary record(int i, size_t regions, int island) {
    ContigSummary c;
    c.name = "record_" + std::to_string(i) + (i % 5 == 0 ? "\"quoted\\" : "");
    c.input_index = i;
    c.length = 700 + i % 97;
    c.composition.a = 100 + i % 11;
    c.composition.c = 200 + i % 13;
    c.composition.g = 190 + i % 7;
    c.composition.t = c.length - c.composition.a - c.composition.c - c.composition.g;
    c.composition.cpg = i % 9;
    c.log_likelihood = -0.97 * static_cast<double>(c.length) - i * 1e-3;
    c.expected_bases.assign(regions, 0.0);
    c.expected_bases[0] = c.length * 0.75;
    c.expected_bases[regions - 1] = c.length * 0.25;
    c.reset_calls(regions);
    for (int k = 0; k < i % 3; ++k) {
        Call call;
        call.begin = 10 * k;
        call.end = 10 * k + 200 + i % 50;
        call.region = island;
        call.mean_posterior = 0.5 + (i % 50) / 100.0;
        c.add_call(call, regions);
    }
    return c;
}

std::string streamed(const SummaryBuilder& b, const RunInfo& info, bool report) {
    std::string text;
    const auto out = [&](std::string_view piece) { text += piece; };
    if (report)
        b.write_report(info, ResourceUsage{}, out);
    else
        b.write_summary(info, out);
    return text;
}

}  // namespace

TEST_CASE("streamed summaries and reports are nlohmann's own layout, totals are the sums") {
    const Model model = compile(load_profile("cpg-island"));
    const size_t R = model.region_names.size();
    const int island = static_cast<int>(
        std::find(model.region_names.begin(), model.region_names.end(), "cpg_island") -
        model.region_names.begin());
    REQUIRE(static_cast<size_t>(island) < R);
    RunInfo info;
    info.profile_name = model.name;
    info.decode_mode = "posterior";
    info.inputs = {"in.fa"};
    // 30,000 records: their entries (over 8 MiB) spill into the temporary file.
    for (const int n : {0, 1, 3, 30000}) {
        SummaryBuilder b(model, false, {true, true, false});
        int64_t length = 0, calls = 0;
        for (int i = 0; i < n; ++i) {
            const ContigSummary c = record(i, R, island);
            length += c.length;
            calls += i % 3;
            b.add(c);
        }
        for (const bool report : {false, true}) {
            const std::string text = streamed(b, info, report);
            const ordered_json doc = ordered_json::parse(text);
            CHECK(dump_with_compact_records(doc) == text);
            REQUIRE(doc["contigs"].size() == static_cast<size_t>(n));
            CHECK(doc["genome"]["contigs"] == n);
            CHECK(doc["genome"]["length"] == length);
            CHECK(doc["genome"]["regions"]["cpg_island"]["calls"] == calls);
            if (n > 0) {
                CHECK(doc["contigs"][0]["name"] == record(0, R, island).name);
                CHECK(doc["contigs"][static_cast<size_t>(n - 1)]["length"] ==
                      record(n - 1, R, island).length);
            }
        }
    }
}

TEST_CASE("expected bases sum the posteriors over known bases only", "[summary]") {
    // README "Summary": unknown bases count for no region. Hand computation over
    // A A N N A C with P(cpg_island) 0.1 .. 0.6: known bases 0, 1, 4, 5 give 0.1+0.2+0.5+0.6.
    const Model model = compile(load_profile("cpg-island-2state"));
    Contig c;
    c.name = "c";
    for (const char* b = "AANNAC"; *b; ++b)
        c.push(*b == 'N' ? base_unknown : *b == 'A' ? base_a : base_c);
    const int island = static_cast<int>(
        std::find(model.region_names.begin(), model.region_names.end(), "cpg_island") -
        model.region_names.begin());
    REQUIRE(model.states == 2);  // one state per region
    std::vector<double> post;
    for (int i = 0; i < 6; ++i) {
        const double p = 0.1 * (i + 1);
        for (int s = 0; s < model.states; ++s)
            post.push_back(model.region_of_state[s] == island ? p : 1 - p);
    }
    RegionTotals totals(model);
    totals.begin_contig(c);
    for (int64_t from : {0, 3}) {  // two blocks, the unknown run across their seam
        BlockView v;
        v.begin = from;
        v.size = 3;
        v.states = model.states;
        v.posterior = post.data() + from * model.states;
        totals.block(v);
    }
    totals.end_contig(c, DecodeResult{});
    CHECK(totals.expected_bases()[island] == Approx(1.4));
    CHECK(totals.expected_bases()[1 - island] == Approx(4 - 1.4));
}

// The screening rule by hand: gc-shift's reported regions are at_shifted and gc_shifted, its
// background typical; min_known 2500 (data/profiles/gc-shift.json).
TEST_CASE("foreign contigs: P(atypical) >= 0.5 over at least window.min_known known bases",
          "[summary]") {
    Profile profile = load_profile("gc-shift");
    profile.is_template = false;  // its placeholder classes are fine for counting
    const Model model = compile(profile);
    REQUIRE(ForeignContigRule::applies(model));
    REQUIRE(ForeignContigRule::min_known(model) == 2500);
    CHECK_FALSE(ForeignContigRule::applies(compile(load_profile("cpg-island"))));
    CHECK_FALSE(ForeignContigRule::applies(compile(load_profile("isochore"))));  // no background
    const auto region = [&](const std::string& name) {
        return static_cast<size_t>(
            std::find(model.region_names.begin(), model.region_names.end(), name) -
            model.region_names.begin());
    };
    const auto contig = [&](const std::string& name, int64_t known, double at, double gc) {
        ContigSummary c;
        c.name = name;
        c.length = known + 100;
        c.unknown = 100;
        c.composition.a = known / 2;
        c.composition.t = known - known / 2;
        c.composition.unknown = 100;
        c.expected_bases.assign(model.region_names.size(), 0.0);
        c.expected_bases[region("at_shifted")] = at * static_cast<double>(known);
        c.expected_bases[region("gc_shifted")] = gc * static_cast<double>(known);
        c.expected_bases[region("typical")] = (1 - at - gc) * static_cast<double>(known);
        return c;
    };
    // 0.3 + 0.2 = 0.5 of 2,500 known bases: foreign (both atypical regions count).
    CHECK(ForeignContigRule::foreign(model, contig("edge", 2500, 0.3, 0.2)));
    CHECK(ForeignContigRule::atypical_fraction(model, contig("edge", 2500, 0.3, 0.2)) ==
          Approx(0.5));
    CHECK_FALSE(ForeignContigRule::foreign(model, contig("short", 2499, 1.0, 0.0)));
    CHECK_FALSE(ForeignContigRule::foreign(model, contig("typical", 10000, 0.2, 0.2)));
    SummaryBuilder b(model, false, {true, false, false});
    b.add(contig("edge", 2500, 0.3, 0.2));
    b.add(contig("short", 56, 1.0, 0.0));
    b.add(contig("long", 50000, 0.9, 0.0));
    RunInfo info;
    const ordered_json doc = ordered_json::parse(streamed(b, info, false));
    const auto& f = doc["foreign_contigs"];
    CHECK(f["count"] == 2);
    CHECK(f["bases"] == 2600 + 50100);
    CHECK(f["min_known_bases"] == 2500);
    CHECK(f["contigs"][0]["name"] == "edge");
    CHECK(f["contigs"][1]["name"] == "long");
    CHECK(f["contigs"][1]["atypical_fraction"].get<double>() == Approx(0.9));
    CHECK(doc["contigs"][1]["atypical_fraction"].get<double>() == Approx(1.0));
    CHECK(f["background_regions"] == ordered_json::array({"typical"}));
}
