// Call ends at base resolution (src/call_ends.cpp): the change-point search against brute force
// over every split, and window-model calls whose ends move onto the bases where the composition
// changes, with their posterior columns.
#include <catch2/catch.hpp>
#include <cmath>
#include <nlohmann/json.hpp>
#include <random>

#include "test_util.hpp"
#include "tidemark/call.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/window.hpp"

using namespace tidemark;
using json = nlohmann::json;

namespace {

// The change point by brute force: for every split k, the log-likelihood of bases [0, k) under
// the left class and [k, n) under the right one, summed afresh; the largest, ties nearest to
// `prefer`, then the smaller k.
int64_t brute_force_split(const std::vector<double>& left, const std::vector<double>& right,
                          int64_t prefer) {
    const int64_t n = static_cast<int64_t>(left.size());
    int64_t best_k = -1;
    double best = 0;
    for (int64_t k = 0; k <= n; ++k) {
        double ll = 0;
        for (int64_t i = 0; i < k; ++i) ll += left[static_cast<size_t>(i)];
        for (int64_t i = k; i < n; ++i) ll += right[static_cast<size_t>(i)];
        const auto distance = [&](int64_t x) { return std::llabs(x - prefer); };
        if (best_k < 0 || ll > best ||
            (ll == best &&
             (distance(k) < distance(best_k) || (distance(k) == distance(best_k) && k < best_k)))) {
            best = ll;
            best_k = k;
        }
    }
    return best_k;
}

// Two classes on windows of 100 bases: "at" (GC 0.2, not reported) and "gc" (GC 0.8, reported).
json two_class_profile(bool refine) {
    json p = json::parse(R"({
      "format": "tidemark-profile/1", "name": "two", "window": {"size": 100},
      "regions": [{"name": "at", "report": false}, {"name": "gc", "report": true}],
      "states": [{"name": "at", "region": "at", "gc": {"mean": 0.2, "dispersion": 0.01}},
                 {"name": "gc", "region": "gc", "gc": {"mean": 0.8, "dispersion": 0.01}}],
      "initial": {"at": 0.5, "gc": 0.5},
      "transitions": {"at": {"at": 0.9, "gc": 0.1}, "gc": {"at": 0.1, "gc": 0.9}}})");
    if (refine) p["calling"] = {{"refine_ends", true}};
    return p;
}

// Calls of a contig from given window posteriors of the "gc" class (one per window).
std::vector<Call> calls_of(const Model& window_model, const Contig& contig,
                           const std::vector<double>& p_gc) {
    const Model view = region_view(window_model);
    IntervalCaller caller(view, CallOptions{});
    WindowExpander bases(window_model, caller);
    std::vector<double> rows;
    for (double p : p_gc) {
        rows.push_back(1 - p);
        rows.push_back(p);
    }
    BlockView v;
    v.begin = 0;
    v.size = static_cast<int64_t>(p_gc.size());
    v.states = 2;
    v.posterior = rows.data();
    v.window = window_model.window;
    bases.begin_contig(contig);
    bases.block(v);
    bases.end_contig(contig, DecodeResult{});
    return caller.calls();
}

std::string repeat(const std::string& unit, int times) {
    std::string s;
    for (int i = 0; i < times; ++i) s += unit;
    return s;
}

}  // namespace

TEST_CASE("best_change_point equals brute force over every split", "[call][call_ends]") {
    std::mt19937_64 rng(21);
    // Small integer scores: every sum is exact, so ties are real ties and the two must agree on
    // the very split, tie rule included.
    std::uniform_int_distribution<int> small(-3, 3);
    for (int trial = 0; trial < 3000; ++trial) {
        const int64_t n = trial % 41;
        std::vector<double> left(static_cast<size_t>(n)), right(static_cast<size_t>(n)),
            diff(static_cast<size_t>(n));
        for (int64_t i = 0; i < n; ++i) {
            left[static_cast<size_t>(i)] = small(rng);
            right[static_cast<size_t>(i)] = small(rng);
            diff[static_cast<size_t>(i)] =
                left[static_cast<size_t>(i)] - right[static_cast<size_t>(i)];
        }
        const int64_t prefer = static_cast<int64_t>(rng() % static_cast<uint64_t>(n + 1));
        INFO("trial " << trial << ", n " << n << ", prefer " << prefer);
        REQUIRE(best_change_point(diff.data(), n, prefer) ==
                brute_force_split(left, right, prefer));
    }
    // Real-valued scores (the G+C log-ratios of two classes): the split found holds the largest
    // prefix sum, none is larger.
    std::uniform_real_distribution<double> gc(0.05, 0.95);
    for (int trial = 0; trial < 200; ++trial) {
        const double a = gc(rng), b = gc(rng);
        const double at_base = std::log((1 - a) / (1 - b)), gc_base = std::log(a / b);
        const int64_t n = 500;
        std::vector<double> diff(n);
        const int64_t change = static_cast<int64_t>(rng() % n);
        std::bernoulli_distribution first(a), second(b);
        for (int64_t i = 0; i < n; ++i)
            diff[static_cast<size_t>(i)] =
                (i < change ? first(rng) : second(rng)) ? gc_base : at_base;
        const int64_t k = best_change_point(diff.data(), n, n / 2);
        double at_k = 0, sum = 0, most = 0;
        for (int64_t i = 0; i < n; ++i) {
            if (i == k) at_k = sum;
            sum += diff[static_cast<size_t>(i)];
            most = std::max(most, sum);
        }
        if (k == n) at_k = sum;
        CHECK(at_k == most);
    }
    const double none[1] = {0};
    CHECK(best_change_point(none, 0, 5) == 0);
}

TEST_CASE("calling.refine_ends: only window profiles, kept by the canonical JSON", "[call_ends]") {
    const Profile p = parse_profile(two_class_profile(true).dump(), "two.json");
    CHECK(p.calling.refine_ends);
    CHECK(parse_profile(to_json(p), "again").calling.refine_ends);
    CHECK(to_json(parse_profile(two_class_profile(false).dump(), "two.json")).find("refine_ends") ==
          std::string::npos);
    json per_base = json::parse(R"({"format": "tidemark-profile/1", "name": "b",
      "regions": [{"name": "r", "report": true}],
      "states": [{"name": "s", "region": "r", "order": 0, "emissions": [[0.25, 0.25, 0.25, 0.25]]}],
      "initial": {"s": 1}, "transitions": {"s": {"s": 1}}, "calling": {"refine_ends": true}})");
    CHECK_THROWS_WITH(parse_profile(per_base.dump(), "b.json"),
                      Catch::Contains("calling.refine_ends") && Catch::Contains("window profiles"));
    per_base["calling"]["refine_ends"] = 1;
    CHECK_THROWS_WITH(parse_profile(per_base.dump(), "b.json"), Catch::Contains("true or false"));
}

TEST_CASE("refined call ends move to where the composition changes", "[call][call_ends]") {
    const Model refined = compile(parse_profile(two_class_profile(true).dump(), "two.json"));
    const Model plain = compile(parse_profile(two_class_profile(false).dump(), "two.json"));
    // Windows of 100: AT-only bases to 250, GC-only bases to 520, AT-only to the end (800).
    const std::string text = repeat("AT", 125) + repeat("GC", 135) + repeat("TA", 140);
    const Contig c = test::contig_from(text);
    // Window posteriors of "gc": windows 2..5 called (0.5 and above).
    const std::vector<double> p = {0.0, 0.1, 0.7, 1.0, 1.0, 0.6, 0.2, 0.0};

    const std::vector<Call> grid = calls_of(plain, c, p);
    REQUIRE(grid.size() == 1);
    CHECK(grid[0].begin == 200);
    CHECK(grid[0].end == 600);

    const std::vector<Call> calls = calls_of(refined, c, p);
    REQUIRE(calls.size() == 1);
    const Call& call = calls[0];
    CHECK(call.begin == 250);
    CHECK(call.end == 520);
    // Each base counts with its window's posterior (as in the posterior tracks): 50 bases at
    // 0.7, 200 at 1.0, 20 at 0.6; the core is the two windows at 1.0 (>= 0.95).
    CHECK(call.mean_posterior == Approx((50 * 0.7 + 200 * 1.0 + 20 * 0.6) / 270).epsilon(1e-15));
    CHECK(call.min_posterior == 0.6);
    CHECK(call.confident_bases == 200);
    CHECK(call.core_begin == 300);
    CHECK(call.core_end == 500);
    CHECK(call.composition.gc_fraction() == 1.0);
    CHECK(call.composition.known() == 270);
}

TEST_CASE("refined call ends stay at contig ends and beside unknown bases", "[call][call_ends]") {
    const Model refined = compile(parse_profile(two_class_profile(true).dump(), "two.json"));
    // GC to 150, then an assembly gap of 150 N (an end made by the gap), GC to 450, AT to the end.
    const std::string text =
        repeat("GC", 75) + std::string(150, 'N') + repeat("CG", 75) + repeat("AT", 75);
    const Contig c = test::contig_from(text);
    const std::vector<Call> calls = calls_of(refined, c, {1.0, 1.0, 0.0, 1.0, 1.0, 0.0});
    REQUIRE(calls.size() == 2);
    CHECK(calls[0].begin == 0);    // contig start
    CHECK(calls[0].end == 150);    // gap start
    CHECK(calls[1].begin == 300);  // gap end
    CHECK(calls[1].end == 450);    // moved from the grid (500) to the change of composition

    // A one-window call between two others keeps at least one base and its order.
    const std::string mixed = repeat("AT", 100) + repeat("GC", 50) + repeat("AT", 100);
    const std::vector<Call> narrow =
        calls_of(refined, test::contig_from(mixed), {0.0, 0.0, 1.0, 0.0, 0.0});
    REQUIRE(narrow.size() == 1);
    CHECK(narrow[0].begin == 200);
    CHECK(narrow[0].end == 300);
}
