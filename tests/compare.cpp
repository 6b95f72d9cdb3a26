// Comparison tests: every metric on small hand-computed examples, merging, contigs in one file
// only, the BED reader's error cases and genome-size reading.
#include "tidemark/compare.hpp"

#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>

#include "test_util.hpp"
#include "tidemark/error.hpp"

using namespace tidemark;
using test::TempFile;

namespace {

IntervalSet set_of(const std::string& path, std::vector<Interval> v) {
    int64_t line = 1;
    for (auto& iv : v) iv.line = line++;
    return {path, std::move(v)};
}

Genome genome_of(std::vector<ChromSize> chroms) {
    return {"g.sizes", std::move(chroms)};
}

const TypeComparison& only(const Comparison& c) {
    REQUIRE(c.types.size() == 1);
    return c.types[0];
}

std::string error_of(const std::function<void()>& f) {
    try {
        f();
    } catch (const InputError& e) {
        return e.what();
    }
    return "";
}

}  // namespace

TEST_CASE("base-level metrics on a hand-computed example", "[compare]") {
    // calls: chr1 [0,10) [20,30), chr2 [0,5)      -> 25 bases
    // truth: chr1 [5,25), chr3 [0,4)              -> 24 bases
    // tp = [5,10) + [20,25) = 10; fp = 25 - 10 = 15; fn = 24 - 10 = 14.
    // genome 100 + 50 + 10 = 160; union = 25 + 24 - 10 = 39; tn = 160 - 39 = 121.
    const auto calls =
        set_of("calls.bed", {{"chr1", 0, 10, "A"}, {"chr1", 20, 30, "A"}, {"chr2", 0, 5, "A"}});
    const auto truth = set_of("truth.bed", {{"chr1", 5, 25, "A"}, {"chr3", 0, 4, "A"}});
    const Genome g = genome_of({{"chr1", 100}, {"chr2", 50}, {"chr3", 10}});
    const Comparison c = compare_intervals(calls, truth, {}, g);
    const BaseMetrics& b = only(c).base;
    CHECK(b.tp == 10);
    CHECK(b.fp == 15);
    CHECK(b.fn == 14);
    REQUIRE(b.tn);
    CHECK(*b.tn == 121);
    CHECK(b.precision == Approx(10.0 / 25));
    CHECK(b.recall == Approx(10.0 / 24));
    CHECK(b.f1 == Approx(20.0 / 49));  // 2*10 / (2*10 + 15 + 14)
    CHECK(b.jaccard == Approx(10.0 / 39));
    REQUIRE(b.accuracy);
    CHECK(*b.accuracy == Approx(131.0 / 160));
    CHECK(c.genome_bases == 160);

    // Interval level of the same example: truth [5,25) is overlapped (by both calls, 5 bases
    // each: 2*5 < 20, so not reciprocally), chr3 [0,4) is not: 1 of 2 hit, 0 reciprocal.
    // Calls [0,10) and [20,30) overlap truth (2*5 >= 10 for the call but not for the truth),
    // chr2 [0,5) does not: 2 of 3, 0 reciprocal; no pairs, so the medians are undefined.
    const IntervalMetrics& m = only(c).intervals;
    CHECK(m.truth == 2);
    CHECK(m.calls == 3);
    CHECK(m.truth_overlapped == 1);
    CHECK(m.truth_reciprocal == 0);
    CHECK(m.calls_overlapping == 2);
    CHECK(m.calls_reciprocal == 0);
    CHECK(std::isnan(m.median_start_offset));
    CHECK(std::isnan(m.median_end_offset));

    // Without a genome there is no tn and no accuracy; the rest is unchanged.
    const Comparison no_genome = compare_intervals(calls, truth, {}, std::nullopt);
    CHECK_FALSE(only(no_genome).base.tn);
    CHECK_FALSE(only(no_genome).base.accuracy);
    CHECK(only(no_genome).base.tp == 10);
}

TEST_CASE("reciprocal matches and median offsets by hand", "[compare]") {
    // truth [100,200) vs call [110,190): overlap 80, 160 >= 100 and 160 >= 80 -> pair, offsets 10,
    // 10 truth [300,400) vs call [290,420): overlap 100, 200 >= 100 and 200 >= 130 -> pair, offsets
    // 10, 20 truth [500,600) vs call [560,700): overlap 40, 80 < 100 -> overlap only truth
    // [800,810): no call. Call [900,1000): no truth. Medians of the two pairs: start (10+10)/2 =
    // 10, end (10+20)/2 = 15.
    const auto truth = set_of(
        "t",
        {{"c", 100, 200, "X"}, {"c", 300, 400, "X"}, {"c", 500, 600, "X"}, {"c", 800, 810, "X"}});
    const auto calls = set_of(
        "c",
        {{"c", 110, 190, "X"}, {"c", 290, 420, "X"}, {"c", 560, 700, "X"}, {"c", 900, 1000, "X"}});
    const IntervalMetrics m = only(compare_intervals(calls, truth, {}, std::nullopt)).intervals;
    CHECK(m.truth == 4);
    CHECK(m.truth_overlapped == 3);
    CHECK(m.truth_reciprocal == 2);
    CHECK(m.calls == 4);
    CHECK(m.calls_overlapping == 3);
    CHECK(m.calls_reciprocal == 2);
    CHECK(m.median_start_offset == 10);
    CHECK(m.median_end_offset == 15);

    // Exactly half of both is reciprocal: truth [0,10), call [5,15): overlap 5, 2*5 >= 10 twice.
    const IntervalMetrics half =
        only(compare_intervals(set_of("c", {{"c", 5, 15, "X"}}), set_of("t", {{"c", 0, 10, "X"}}),
                               {}, std::nullopt))
            .intervals;
    CHECK(half.truth_reciprocal == 1);
    CHECK(half.median_start_offset == 5);
    CHECK(half.median_end_offset == 5);

    // After merging, intervals of a file are disjoint and do not touch, so an interval has at
    // most one reciprocal partner: truth [0,100) with calls [0,50) (overlap 50, reciprocal) and
    // [51,100) (overlap 49: 2*49 < 100 of the truth, not reciprocal); offsets 0 and 50.
    const IntervalMetrics single =
        only(compare_intervals(set_of("c", {{"c", 0, 50, "X"}, {"c", 51, 100, "X"}}),
                               set_of("t", {{"c", 0, 100, "X"}}), {}, std::nullopt))
            .intervals;
    CHECK(single.truth_reciprocal == 1);
    CHECK(single.calls_reciprocal == 1);
    CHECK(single.median_start_offset == 0);
    CHECK(single.median_end_offset == 50);
}

TEST_CASE("odd and even numbers of pairs give the middle value or the mean of the two",
          "[compare]") {
    // Pairs with start offsets 1, 2, 7 (odd count: median 2), then 1, 2, 7, 9 (even: 4.5).
    std::vector<Interval> t, c;
    const int64_t offsets[] = {7, 1, 9, 2};
    for (int i = 0; i < 4; ++i) {
        t.push_back({"c", 1000 * i, 1000 * i + 100, "X"});
        c.push_back({"c", 1000 * i + offsets[i], 1000 * i + 100, "X"});
    }
    const IntervalMetrics four =
        only(compare_intervals(set_of("c", c), set_of("t", t), {}, std::nullopt)).intervals;
    CHECK(four.median_start_offset == 4.5);
    CHECK(four.median_end_offset == 0);
    t.erase(t.begin() + 2);
    c.erase(c.begin() + 2);
    const IntervalMetrics three =
        only(compare_intervals(set_of("c", c), set_of("t", t), {}, std::nullopt)).intervals;
    CHECK(three.median_start_offset == 2);
}

TEST_CASE("overlapping, touching and unsorted intervals are merged per type first", "[compare]") {
    // Calls [20,30) [0,10) [5,12) [12,15) [40,40) -> sorted; [0,10)+[5,12) overlap,
    // [12,15) touches: merged [0,15) and [20,30); 2 records absorbed, 1 empty, unsorted.
    // Truth [0,30): tp 25, fp 0, fn 5 (summing the raw records would count [5,10) twice: 30).
    const auto calls = set_of("calls.bed", {{"c", 20, 30, "A"},
                                            {"c", 0, 10, "A"},
                                            {"c", 5, 12, "A"},
                                            {"c", 12, 15, "A"},
                                            {"c", 40, 40, "A"}});
    const auto truth = set_of("truth.bed", {{"c", 0, 30, "A"}});
    const Comparison r = compare_intervals(calls, truth, {}, std::nullopt);
    CHECK(r.calls.intervals == 5);
    CHECK(r.calls.merged == 2);
    CHECK(r.calls.empty == 1);
    CHECK_FALSE(r.calls.sorted);
    CHECK(r.truth.sorted);
    const TypeComparison& t = only(r);
    CHECK(t.base.tp == 25);
    CHECK(t.base.fp == 0);
    CHECK(t.base.fn == 5);
    CHECK(t.intervals.calls == 2);
    // Different types are not merged with each other.
    const auto mixed = set_of("m", {{"c", 0, 10, "A"}, {"c", 5, 15, "B"}});
    const Comparison mr = compare_intervals(mixed, mixed, {}, std::nullopt);
    CHECK(mr.calls.merged == 0);
    REQUIRE(mr.types.size() == 2);
    CHECK(mr.types[0].type == "A");
    CHECK(mr.types[1].type == "B");
    CHECK(mr.types[1].base.tp == 10);
}

TEST_CASE("types are scored separately and --name folds them into one", "[compare]") {
    // Calls A [0,10), B [10,20); truth A [0,20). By type: A tp 10 fn 10, B fp 10 (no truth:
    // precision 0, recall undefined). With one name for all, the calls merge into [0,20): tp 20.
    const auto calls = set_of("c", {{"c", 0, 10, "A"}, {"c", 10, 20, "B"}});
    const auto truth = set_of("t", {{"c", 0, 20, "A"}});
    const Comparison typed = compare_intervals(calls, truth, {}, std::nullopt);
    REQUIRE(typed.types.size() == 2);
    CHECK(typed.types[0].base.tp == 10);
    CHECK(typed.types[0].base.fn == 10);
    CHECK(typed.types[1].base.fp == 10);
    CHECK(typed.types[1].base.precision == 0);
    CHECK(std::isnan(typed.types[1].base.recall));
    CompareOptions one;
    one.name = "any";
    const TypeComparison folded = only(compare_intervals(calls, truth, one, std::nullopt));
    CHECK(folded.type == "any");
    CHECK(folded.base.tp == 20);
    CHECK(folded.base.fp == 0);
    CHECK(folded.intervals.calls == 1);
    CompareOptions pick;
    pick.types = {"B", "missing"};
    const Comparison picked = compare_intervals(calls, truth, pick, std::nullopt);
    REQUIRE(picked.types.size() == 2);
    CHECK(picked.types[0].type == "B");
    CHECK(picked.types[1].base.tp == 0);
    CHECK(std::isnan(picked.types[1].base.precision));
}

TEST_CASE("contigs present in one file only count fully", "[compare]") {
    // chrX only in calls: 7 false-positive bases; chrY only in truth: 3 false negatives.
    const Comparison r =
        compare_intervals(set_of("c", {{"chrX", 0, 7, "A"}}), set_of("t", {{"chrY", 2, 5, "A"}}),
                          {}, genome_of({{"chrX", 10}, {"chrY", 10}, {"chrZ", 5}}));
    const BaseMetrics& b = only(r).base;
    CHECK(b.tp == 0);
    CHECK(b.fp == 7);
    CHECK(b.fn == 3);
    CHECK(*b.tn == 25 - 10);
    CHECK(b.f1 == 0);
}

TEST_CASE("missing types and genome mismatches name file and line", "[compare]") {
    const auto unnamed = set_of("calls.bed", {{"c", 0, 5, "A"}, {"c", 5, 9, ""}});
    CHECK_THAT(error_of([&] { compare_intervals(unnamed, unnamed, {}, std::nullopt); }),
               Catch::Contains("calls.bed:2") && Catch::Contains("--name"));
    const auto named = set_of("calls.bed", {{"c", 0, 5, "A"}, {"d", 0, 50, "A"}});
    CHECK_THAT(
        error_of([&] {
            compare_intervals(named, named, {}, genome_of({{"c", 10}}));
        }),
        Catch::Contains("calls.bed:2") && Catch::Contains("'d'") && Catch::Contains("g.sizes"));
    CHECK_THAT(error_of([&] {
                   compare_intervals(named, named, {}, genome_of({{"c", 10}, {"d", 40}}));
               }),
               Catch::Contains("calls.bed:2") && Catch::Contains("beyond the length 40"));
}

TEST_CASE("the table and JSON carry the numbers, NA and null where undefined", "[compare]") {
    const auto calls =
        set_of("calls.bed", {{"chr1", 0, 10, "A"}, {"chr1", 20, 30, "A"}, {"chr2", 0, 5, "A"}});
    const auto truth = set_of("truth.bed", {{"chr1", 5, 25, "A"}, {"chr3", 0, 4, "A"}});
    const Comparison c = compare_intervals(calls, truth, {}, std::nullopt);
    const std::string table = compare_table(c);
    CHECK_THAT(table, Catch::Contains("0.4000"));  // precision 10/25
    CHECK_THAT(table, Catch::Contains("0.4167"));  // recall 10/24
    CHECK_THAT(table, Catch::Contains("NA"));      // tn without a genome
    const auto j = nlohmann::json::parse(compare_json(c, "tidemark compare"));
    CHECK(j["format"] == "tidemark-compare/1");
    CHECK(j["types"][0]["base"]["tp"] == 10);
    CHECK(j["types"][0]["base"]["tn"].is_null());
    CHECK(j["types"][0]["intervals"]["truth_overlapped_fraction"] == 0.5);
    CHECK(j["types"][0]["intervals"]["median_abs_start_offset"].is_null());
    CHECK(j["genome"].is_null());
}

TEST_CASE("BED reader errors name the file and line", "[compare][intervals]") {
    const std::vector<std::pair<std::string, std::string>> cases = {
        {"c\t0\t5\tA\nc\t9\t3\tA\n", ":2: start 9 is greater than end 3"},
        {"c\t-1\t5\n", ":1: start -1 is negative"},
        {"c\t0\t5.5\n", ":1: end '5.5' is not an integer"},
        {"c\t0\n", ":1: expected at least 3 tab-separated columns"},
        {"# ok\ntrack name=x\nbrowser position c\nchrom\tstart\tend\n",
         ":4: start 'start' is not an integer (header"},
    };
    for (size_t i = 0; i < cases.size(); ++i) {
        TempFile f(cases[i].first, ".bed");
        CHECK_THAT(error_of([&] { read_bed(f.path()); }),
                   Catch::Contains(f.path() + cases[i].second));
    }
    // "track" must be a whole first word: "trackfoo" is data, here a line with too few columns.
    TempFile f("trackfoo\n", ".bed");
    CHECK_THAT(error_of([&] { read_bed(f.path()); }),
               Catch::Contains(f.path() + ":1: expected at least 3"));
    // Good files: CR/LF, no final newline, headers, blank lines; line numbers are kept.
    TempFile good("track x\r\n\r\nc\t1\t2\tA\r\nc\t3\t4", ".bed");
    const auto v = read_bed(good.path());
    REQUIRE(v.size() == 2);
    CHECK(v[0].line == 3);
    CHECK(v[0].name == "A");
    CHECK(v[1].line == 4);
    CHECK(v[1].name.empty());
}

TEST_CASE("genome sizes come from chrom sizes, .fai or FASTA", "[compare]") {
    TempFile sizes("chr1\t100\nchr2 50\n\n", ".sizes");
    Genome g = read_genome(sizes.path());
    REQUIRE(g.chroms.size() == 2);
    CHECK(g.chroms[1].name == "chr2");
    CHECK(g.chroms[1].length == 50);
    TempFile fai("a\t12\t3\t60\t61\nb\t7\t20\t60\t61\n", ".fai");  // samtools faidx columns
    g = read_genome(fai.path());
    CHECK(g.chroms[0].length == 12);
    CHECK(g.chroms[1].length == 7);
    TempFile fasta(">x desc\nACGTN\nAC\n>y\n\n>z\nA\n", ".fa");
    g = read_genome(fasta.path());
    REQUIRE(g.chroms.size() == 3);
    CHECK(g.chroms[0].length == 7);
    CHECK(g.chroms[1].length == 0);
    CHECK(g.chroms[2].length == 1);
    TempFile dup("a\t1\na\t2\n", ".sizes");
    CHECK_THAT(error_of([&] { read_genome(dup.path()); }),
               Catch::Contains(dup.path() + ":2: duplicate"));
    TempFile bad("a\tlots\n", ".sizes");
    CHECK_THAT(error_of([&] { read_genome(bad.path()); }),
               Catch::Contains(bad.path() + ":1: length 'lots'"));
    TempFile single("a\n", ".sizes");
    CHECK_THAT(error_of([&] { read_genome(single.path()); }),
               Catch::Contains(single.path() + ":1:"));
}
