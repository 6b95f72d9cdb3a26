// Interval calling on hand-made posterior tracks, and the published CpG-island criteria.
#include "tidemark/call.hpp"

#include <catch2/catch.hpp>

#include "test_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/track.hpp"

using namespace tidemark;

namespace {

Model two_region_model(const std::string& reported = "isle") {
    Profile p;
    p.name = "t";
    p.regions = {{reported, true, ""}, {"sea", false, ""}};
    p.states = {{"i", 0, 0, {{0.25, 0.25, 0.25, 0.25}}}, {"s", 1, 0, {{0.25, 0.25, 0.25, 0.25}}}};
    p.initial = {0.5, 0.5};
    p.transitions = {{0.5, 0.5}, {0.5, 0.5}};
    return compile(p);
}

// Feeds P(isle) values to the caller in blocks of `block` positions.
std::vector<Call> call(const std::vector<double>& p_isle, CallOptions opt, size_t block = 3,
                       const std::string& seq = "", const std::string& reported = "isle") {
    const Model m = two_region_model(reported);
    const Contig c = test::contig_from(seq.empty() ? std::string(p_isle.size(), 'A') : seq);
    IntervalCaller caller(m, opt);
    caller.begin_contig(c);
    std::vector<double> post;
    for (double p : p_isle) {
        post.push_back(p);
        post.push_back(1 - p);
    }
    for (size_t s = 0; s < p_isle.size(); s += block) {
        BlockView v;
        v.begin = static_cast<int64_t>(s);
        v.size = static_cast<int64_t>(std::min(block, p_isle.size() - s));
        v.states = 2;
        v.posterior = post.data() + 2 * s;
        caller.block(v);
    }
    caller.end_contig(c, DecodeResult{});
    return caller.calls();
}

}  // namespace

TEST_CASE("maximal runs above the threshold, with mean and min posterior", "[call]") {
    // Hand computation: runs >= 0.5 are [1,3) (0.6, 0.9) and [5,6) (0.5).
    const std::vector<double> p = {0.1, 0.6, 0.9, 0.2, 0.4, 0.5, 0.0};
    const auto calls = call(p, CallOptions{});
    REQUIRE(calls.size() == 2);
    CHECK((calls[0].begin == 1 && calls[0].end == 3));
    CHECK(calls[0].mean_posterior == Approx(0.75));
    CHECK(calls[0].min_posterior == Approx(0.6));
    CHECK((calls[1].begin == 5 && calls[1].end == 6));
    CHECK(calls[1].mean_posterior == Approx(0.5));
}

TEST_CASE("runs closer than the merge gap are merged, gap bases included", "[call]") {
    const std::vector<double> p = {0.9, 0.9, 0.2, 0.3, 0.8, 0.1, 0.1, 0.1, 0.7};
    CallOptions opt;
    opt.merge_gap = 3;  // gap of 2 (positions 2-3) merges; gap of 3 (5-7) does not
    const auto calls = call(p, opt, 2);
    REQUIRE(calls.size() == 2);
    CHECK((calls[0].begin == 0 && calls[0].end == 5));
    CHECK(calls[0].mean_posterior == Approx((0.9 + 0.9 + 0.2 + 0.3 + 0.8) / 5));
    CHECK(calls[0].min_posterior == Approx(0.2));
    // Hand computation: no base reaches the core level 0.95.
    CHECK(calls[0].confident_bases == 0);
    CHECK((calls[1].begin == 8 && calls[1].end == 9));
    opt.high_posterior = 0.85;  // 2 of the 5 bases (0.9, 0.9) reach it; the call at 8 (0.7) none
    const auto lower = call(p, opt, 2);
    REQUIRE(lower.size() == 2);
    CHECK(lower[0].confident_bases == 2);
    CHECK(lower[0].confident_fraction() == Approx(0.4));
    CHECK(lower[1].confident_fraction() == 0.0);
    opt.merge_gap = 4;  // now the gap of 3 merges too
    const auto one = call(p, opt, 4);
    REQUIRE(one.size() == 1);
    CHECK((one[0].begin == 0 && one[0].end == 9));
}

TEST_CASE("calls shorter than the minimum length are dropped after merging", "[call]") {
    const std::vector<double> p = {0.9, 0.1, 0.9, 0.1, 0.1, 0.9, 0.9, 0.9};
    CallOptions opt;
    opt.min_length = 3;
    auto calls = call(p, opt);
    REQUIRE(calls.size() == 1);
    CHECK((calls[0].begin == 5 && calls[0].end == 8));
    opt.merge_gap = 2;  // [0,3) forms by merging and is long enough
    calls = call(p, opt);
    REQUIRE(calls.size() == 2);
    CHECK((calls[0].begin == 0 && calls[0].end == 3));
}

TEST_CASE("published CpG-island criteria at their borders", "[call]") {
    // Gardiner-Garden & Frommer (1987), J. Mol. Biol. 196:261-282: length >= 200, GC > 0.5,
    // o/e > 0.6. Takai & Jones (2002), PNAS 99:3740-3745: length > 500, GC >= 0.55, o/e >= 0.65.
    // Compositions built by hand: 100 C + 100 G + ... with a chosen CpG count.
    Composition c;
    c.a = 45;
    c.t = 45;
    c.c = 55;
    c.g = 55;    // L = 200, GC = 0.55
    c.cpg = 10;  // o/e = 10*200/(55*55) = 0.661
    CHECK(meets_island_criteria(IslandCriteria::ggf1987, 200, c));
    CHECK_FALSE(meets_island_criteria(IslandCriteria::ggf1987, 199, c));
    CHECK_FALSE(meets_island_criteria(IslandCriteria::tj2002, 500, c));  // needs > 500
    Composition long_c = c;
    long_c.a = long_c.t = 113;
    long_c.c = long_c.g = 138;  // L = 502, GC = 0.5498 < 0.55
    long_c.cpg = 26;
    CHECK_FALSE(meets_island_criteria(IslandCriteria::tj2002, 502, long_c));
    long_c.a = long_c.t = 112;
    long_c.c = long_c.g = 139;  // L = 502, GC = 0.5538
    long_c.cpg = 25;            // o/e = 25*502/139^2 = 0.6496 < 0.65
    CHECK_FALSE(meets_island_criteria(IslandCriteria::tj2002, 502, long_c));
    long_c.cpg = 26;  // o/e = 0.6756
    CHECK(meets_island_criteria(IslandCriteria::tj2002, 502, long_c));
    Composition half = c;
    half.a = half.t = 50;
    half.c = half.g = 50;  // GC exactly 0.5 fails GGF's strict "> 0.5"
    CHECK_FALSE(meets_island_criteria(IslandCriteria::ggf1987, 200, half));
    CHECK(meets_island_criteria(IslandCriteria::none, 1, half));
    CHECK_THROWS_AS(parse_island_criteria("ggf"), UsageError);
}

TEST_CASE("criteria filter applies to the called interval's own bases", "[call]") {
    // 210 bases of CGCG... : GC = 1, o/e = 105*210/(105*105) = 2 -> passes GGF 1987;
    // 210 bases of CCGG...: CpG 52/53, o/e about 1 -> passes; 210 of GGCC...: o/e ~ 0.95.
    const std::string seq = std::string(10, 'A') + [] {
        std::string s;
        for (int i = 0; i < 105; ++i) s += "CG";
        return s;
    }() + std::string(10, 'A');
    std::vector<double> p(seq.size(), 0.0);
    for (size_t i = 10; i < 220; ++i) p[i] = 0.9;
    CallOptions opt;
    opt.criteria = IslandCriteria::ggf1987;
    const auto calls = call(p, opt, 64, seq, "cpg_island");
    REQUIRE(calls.size() == 1);
    CHECK(calls[0].composition.cpg == 105);
    CHECK(calls[0].composition.gc_fraction() == 1.0);
    opt.criteria = IslandCriteria::tj2002;  // 210 bp is too short for > 500
    CHECK(call(p, opt, 64, seq, "cpg_island").empty());
    // CpG-island criteria judge cpg_island calls only: another region type keeps its call.
    CHECK(call(p, opt, 64, seq, "isle").size() == 1);
}

TEST_CASE("BED line layout", "[call]") {
    Contig c = test::contig_from("ACGTACGTAC", "chr7");
    c.offset = 1000;
    Call k;
    k.begin = 2;
    k.end = 6;
    k.mean_posterior = 0.8765;
    k.min_posterior = 0.51;
    k.confident_bases = 3;                 // 3 of 4 bases: 0.75
    k.composition = composition(c, 2, 6);  // G T A C: GC 0.5, no CpG -> o/e 0
    const Model m = two_region_model();
    CHECK(format_bed_line(BedStyle::plain, m, c, k) ==
          "chr7\t1002\t1006\tisle\t877\t.\t0.8765\t0.7500\t0.5000\t0.0000\n");
    k.composition = composition(test::contig_from("AATT"), 0, 4);
    const std::string line = format_bed_line(BedStyle::plain, m, c, k);
    CHECK(line.substr(line.size() - 10) == "0.0000\tNA\n");
    const std::string header = format_bed_header(BedStyle::plain, m, "tidemark scan x.fa");
    CHECK(header.find(
              "#chrom\tstart\tend\tname\tscore\tstrand\tmean_posterior\tconfident_fraction\tgc_"
              "fraction\tcpg_obs_exp\n") != std::string::npos);
    // README "Calls (BED6+4)": the browser style puts its three columns after the sixth.
    CHECK(format_bed_header(BedStyle::browser, m, "x")
              .find("#chrom\tstart\tend\tname\tscore\tstrand\tthickStart\tthickEnd\titemRgb\tmean_"
                    "posterior\tconfident_fraction\t") != std::string::npos);
}

TEST_CASE("assembly gaps split calls; shorter unknown runs do not", "[call]") {
    // README "Calls": a run of >= 100 unknown bases ends a call as a contig end does, whatever
    // the merge gap and the block size; a run of 99 stays inside the call.
    const std::string left(50, 'A'), right(60, 'A');
    for (const size_t block : {size_t{7}, size_t{64}, size_t{1000}}) {
        CallOptions opt;
        opt.merge_gap = 500;
        const std::string gapped = left + std::string(100, 'N') + right;
        const auto split = call(std::vector<double>(gapped.size(), 0.9), opt, block, gapped);
        REQUIRE(split.size() == 2);
        CHECK((split[0].begin == 0 && split[0].end == 50));
        CHECK((split[1].begin == 150 && split[1].end == 210));
        const std::string short_run = left + std::string(99, 'N') + right;
        const auto whole = call(std::vector<double>(short_run.size(), 0.9), opt, block, short_run);
        REQUIRE(whole.size() == 1);
        CHECK((whole[0].begin == 0 && whole[0].end == 209));
        // Each part is judged alone: with a minimum of 55 bases the left part (50) is dropped.
        opt.min_length = 55;
        const auto kept = call(std::vector<double>(gapped.size(), 0.9), opt, block, gapped);
        REQUIRE(kept.size() == 1);
        CHECK((kept[0].begin == 150 && kept[0].end == 210));
        // A run below the threshold before the gap and one above after it: no merge across.
        std::vector<double> p(gapped.size(), 0.9);
        for (size_t i = 40; i < 150; ++i) p[i] = 0.1;
        opt.min_length = 1;
        const auto apart = call(p, opt, block, gapped);
        REQUIRE(apart.size() == 2);
        CHECK((apart[0].begin == 0 && apart[0].end == 40));
        CHECK((apart[1].begin == 150 && apart[1].end == 210));
    }
}

TEST_CASE("a call's core spans its bases at or above the high-confidence level", "[call]") {
    // Hand computation: the run [0,6) has bases >= 0.95 at 1, 2 and 4 -> core [1, 5); the run
    // [8,9) has none -> core collapses to its start.
    const std::vector<double> p = {0.6, 0.97, 0.99, 0.7, 0.96, 0.5, 0.1, 0.2, 0.8};
    CallOptions opt;
    opt.high_posterior = 0.95;
    const auto calls = call(p, opt, 2);
    REQUIRE(calls.size() == 2);
    CHECK((calls[0].core_begin == 1 && calls[0].core_end == 5));
    CHECK((calls[1].core_begin == 8 && calls[1].core_end == 8));
    opt.merge_gap = 3;  // merged across the gap 6-7: the core still ends at the last high base
    const auto merged = call(p, opt, 4);
    REQUIRE(merged.size() == 1);
    CHECK((merged[0].core_begin == 1 && merged[0].core_end == 5));
}
