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
