// Window profiles (include/tidemark/window.hpp and the window parts of profile.hpp): parsing and
// its errors, the canonical JSON round trip, min_length rounded to whole windows, the
// beta-binomial against its rising-factorial form and its moments, the scaled emission rows, the
// adapter that hands window posteriors to base-level sinks, and decoding against enumeration.
#include "tidemark/window.hpp"

#include <catch2/catch.hpp>
#include <cmath>
#include <functional>
#include <limits>
#include <nlohmann/json.hpp>
#include <random>

#include "test_util.hpp"
#include "tidemark/decode.hpp"
#include "tidemark/error.hpp"
#include "tidemark/profile.hpp"

using namespace tidemark;
using json = nlohmann::json;

namespace {

// Two regions: "at" with two states and a min_length chain, "gc" with one state.
json window_profile() {
    return json::parse(R"({
      "format": "tidemark-profile/1", "name": "w", "window": {"size": 7},
      "regions": [{"name": "at", "report": true, "min_length": 10}, {"name": "gc", "report": false}],
      "states": [
        {"name": "at1", "region": "at", "gc": {"mean": 0.3, "dispersion": 0.05}},
        {"name": "at2", "region": "at", "gc": {"mean": 0.45, "dispersion": 0.2}},
        {"name": "gc", "region": "gc", "gc": {"mean": 0.7, "dispersion": 0.001}}],
      "initial": {"at1": 0.5, "at2": 0.2, "gc": 0.3},
      "transitions": {"at1": {"at1": 0.6, "at2": 0.25, "gc": 0.15},
                      "at2": {"at1": 0.3, "at2": 0.4, "gc": 0.3},
                      "gc": {"at1": 0.2, "gc": 0.8}}
    })");
}

std::string error_for(const json& doc) {
    try {
        parse_profile(doc.dump(), "w.json");
    } catch (const ProfileError& e) {
        return e.what();
    }
    return "";
}

// The beta-binomial probability written as a ratio of rising factorials,
// C(n, k) a^(k) b^(n-k) / (a + b)^(n) with x^(j) = x (x + 1) ... (x + j - 1) (the Polya-urn form
// of the distribution; e.g. Johnson, Kemp & Kotz 2005, Univariate Discrete Distributions, 3rd
// ed., ch. 6, from memory), summed in long double term by term: no lgamma involved.
long double rising_log(long double x, int64_t j) {
    long double s = 0;
    for (int64_t i = 0; i < j; ++i) s += std::log(x + static_cast<long double>(i));
    return s;
}
long double choose_log(int64_t n, int64_t k) {
    long double s = 0;
    for (int64_t i = 1; i <= k; ++i)
        s += std::log(static_cast<long double>(n - k + i)) - std::log(static_cast<long double>(i));
    return s;
}
long double rising_form(double mean, double rho, int64_t k, int64_t n) {
    const long double total = 1.0L / rho - 1, a = mean * total, b = (1 - mean) * total;
    return choose_log(n, k) + rising_log(a, k) + rising_log(b, n - k) - rising_log(a + b, n);
}

// One window state of the given mean and dispersion, compiled.
Model single_state(double mean, double rho, int64_t window = 100) {
    json d = json::parse(R"({"format": "tidemark-profile/1", "name": "one",
      "regions": [{"name": "r", "report": true}],
      "states": [{"name": "s", "region": "r", "gc": {"mean": 0.5, "dispersion": 0.5}}],
      "initial": {"s": 1}, "transitions": {"s": {"s": 1}}})");
    d["window"] = {{"size", window}};
    d["states"][0]["gc"] = {{"mean", mean}, {"dispersion", rho}};
    return compile(parse_profile(d.dump(), "one"));
}

// Base-level blocks received by a sink: region posteriors and base codes, with their starts.
struct Capture : DecodeSink {
    std::vector<double> posterior;
    std::vector<uint8_t> bases;
    std::vector<std::pair<int64_t, int64_t>> blocks;
    int states = 0;
    int contigs_begun = 0, contigs_ended = 0;
    void begin_contig(const Contig&) override { ++contigs_begun; }
    void block(const BlockView& v) override {
        blocks.emplace_back(v.begin, v.size);
        states = v.states;
        posterior.insert(posterior.end(), v.posterior, v.posterior + v.size * v.states);
        bases.insert(bases.end(), v.bases, v.bases + v.size);
    }
    void end_contig(const Contig&, const DecodeResult&) override { ++contigs_ended; }
    std::unique_ptr<DecodeSink> fork() const override { return std::make_unique<Capture>(); }
    void join(DecodeSink& later) override {
        auto& o = dynamic_cast<Capture&>(later);
        posterior.insert(posterior.end(), o.posterior.begin(), o.posterior.end());
        bases.insert(bases.end(), o.bases.begin(), o.bases.end());
        blocks.insert(blocks.end(), o.blocks.begin(), o.blocks.end());
    }
};

struct NoFork : DecodeSink {
    void block(const BlockView&) override {}
};

}  // namespace

TEST_CASE("a window profile parses and compiles", "[window]") {
    const Profile p = parse_profile(window_profile().dump(), "w.json");
    CHECK(p.windowed());
    CHECK(p.window_size == 7);
    CHECK(p.states[2].gc.mean == 0.7);
    CHECK(p.states[2].gc.dispersion == 0.001);
    CHECK(p.states[0].emissions.empty());
    const Model m = compile(p);
    CHECK(m.window == 7);
    // alpha = m (1/rho - 1), beta = (1 - m)(1/rho - 1), as profile.hpp defines them
    CHECK(m.gc_alpha.back() == Approx(0.7 * 999).epsilon(1e-14));
    CHECK(m.gc_beta.back() == Approx(0.3 * 999).epsilon(1e-14));
    CHECK(m.positions(0) == 0);
    CHECK(m.positions(7) == 1);
    CHECK(m.positions(8) == 2);
    CHECK(m.position_start(3) == 21);
}

TEST_CASE("window profiles: validation names the offending field", "[window]") {
    struct Case {
        std::function<void(json&)> edit;
        std::string fragment;
    };
    const std::vector<Case> cases = {
        {[](json& d) { d["states"][1].erase("gc"); },
         "states[1] ('at2'): missing required field 'gc'"},
        {[](json& d) { d["states"][0]["gc"]["mean"] = 0.0; },
         "states[0] ('at1').gc.mean: must lie strictly between 0 and 1, not 0"},
        {[](json& d) { d["states"][0]["gc"]["mean"] = 1.0; },
         "gc.mean: must lie strictly between 0 and 1, not 1"},
        {[](json& d) { d["states"][0]["gc"]["mean"] = -0.2; },
         "gc.mean: must lie strictly between 0 and 1"},
        {[](json& d) { d["states"][0]["gc"]["mean"] = "0.4"; }, "gc.mean: must be a number"},
        {[](json& d) { d["states"][0]["gc"]["dispersion"] = 1.0; },
         "gc.dispersion: must lie strictly between 0 and 1, not 1"},
        {[](json& d) { d["states"][0]["gc"].erase("dispersion"); },
         "missing required field 'dispersion'"},
        {[](json& d) { d["states"][0]["gc"]["sd"] = 0.1; }, "unknown field 'sd'"},
        {[](json& d) { d["states"][0]["gc"]["dispersion"] = 1e-320; },
         "gc: mean 0.3 and dispersion"},
        {[](json& d) { d["states"][0]["order"] = 0; },
         "states[0].order: a window profile (window.size is set) gives each state 'gc'"},
        {[](json& d) {
             d["states"][2]["emissions"] = json::array({{0.25, 0.25, 0.25, 0.25}});
         },
         "states[2].emissions: a window profile"},
        {[](json& d) { d["window"]["size"] = 0; }, "window.size: must be at least 1 base"},
        {[](json& d) { d["window"]["size"] = -5; }, "window.size: must be a non-negative integer"},
        {[](json& d) { d["window"]["size"] = 2.5; }, "window.size: must be a non-negative integer"},
        {[](json& d) { d["window"] = json::object(); }, "window: missing required field 'size'"},
        {[](json& d) { d["window"]["step"] = 3; }, "unknown field 'step'"},
        {[](json& d) { d.erase("window"); }, "states[0].gc: 'gc' emissions need a window profile"},
        {[](json& d) { d["regions"][0]["min_length"] = 7 * 2048 + 1; },
         "regions[0].min_length: must be from 1 to 14336 (each window"},
        {[](json& d) {
             d["window"]["size"] = std::numeric_limits<int64_t>::max();  // no overflow in the bound
             d["regions"][0]["min_length"] = 0;
         },
         "min_length: must be from 1 to 9223372036854775807"},
        {[](json& d) {
             d["states"][1]["tie"] = "t";
             d["states"][0]["tie"] = "t";
         },
         "tie group 't': gc differs from 'at1'"},
    };
    for (const auto& c : cases) {
        json d = window_profile();
        c.edit(d);
        const std::string e = error_for(d);
        INFO(d.dump());
        CHECK_THAT(e, Catch::Contains(c.fragment));
        CHECK_THAT(e, Catch::StartsWith("w.json: "));
    }
}

TEST_CASE("window profiles: canonical JSON round-trips", "[window]") {
    const Profile p = parse_profile(window_profile().dump(), "w.json");
    const std::string text = to_json(p);
    const Profile q = parse_profile(text, "round trip");
    CHECK(to_json(q) == text);
    CHECK(q.window_size == p.window_size);
    REQUIRE(q.states.size() == p.states.size());
    for (size_t s = 0; s < p.states.size(); ++s) {
        CHECK(q.states[s].gc.mean == p.states[s].gc.mean);
        CHECK(q.states[s].gc.dispersion == p.states[s].gc.dispersion);
        CHECK(q.states[s].emissions.empty());
    }
    CHECK(q.regions[0].min_length == 10);
    CHECK(q.transitions == p.transitions);
    const json doc = json::parse(text);
    CHECK(doc["window"]["size"] == 7);
    CHECK_FALSE(doc["states"][0].contains("order"));  // the other kind's fields are not written
    CHECK_FALSE(doc["states"][0].contains("emissions"));
    // Per-base profiles are written without a window.
    const Profile cpg = load_profile("cpg-island");
    CHECK_FALSE(json::parse(to_json(cpg)).contains("window"));
}

TEST_CASE("min_length in bases becomes a chain of whole windows, rounded up", "[window]") {
    // L = ceil(min_length / window size) (RegionSpec::min_length)
    const std::vector<std::pair<int64_t, int64_t>> cases = {{1, 1},  {6, 1},  {7, 1},  {8, 2},
                                                            {14, 2}, {15, 3}, {70, 10}};
    for (const auto& [bases, windows] : cases) {
        json d = window_profile();
        d["regions"][0]["min_length"] = bases;
        const Profile p = parse_profile(d.dump(), "w.json");
        INFO("min_length " << bases);
        CHECK(p.chain_length(0) == windows);
        CHECK(p.chain_length(1) == 1);
        const Model m = compile(p);
        CHECK(m.states == 2 * windows + 1);  // two states in the chain region, one outside
        CHECK(m.chain_length[0] == windows);
        CHECK(m.chain_copy[windows - 1] == windows);
        CHECK(m.region_of_state.back() == 1);
    }
    // A window size beyond any sequence: one window, and the rounding does not overflow.
    json d = window_profile();
    d["window"]["size"] = std::numeric_limits<int64_t>::max();
    d["regions"][0]["min_length"] = 1000;
    const Profile huge = parse_profile(d.dump(), "w.json");
    CHECK(huge.chain_length(0) == 1);
    CHECK(compile(huge).positions(1000) == 1);
    // A region whose min_length fits in one window needs no way to stay in the region.
    d = window_profile();
    d["regions"][1]["min_length"] = 7;
    d["transitions"]["gc"] = {{"at1", 1.0}};
    CHECK(parse_profile(d.dump(), "w.json").chain_length(1) == 1);
    d["regions"][1]["min_length"] = 8;
    CHECK_THAT(error_for(d), Catch::Contains("no transition to a state of that region"));
}

TEST_CASE("window_log_probability equals the beta-binomial's rising-factorial form", "[window]") {
    // Small n: every k, against the product form summed in long double.
    for (const auto& [mean, rho] : std::vector<std::pair<double, double>>{
             {0.3, 0.05}, {0.5, 0.5}, {0.9, 0.9}, {0.41, 0.001}}) {
        const Model m = single_state(mean, rho);
        for (int64_t n : {1, 2, 5, 13, 40}) {
            double sum = 0, first = 0, second = 0;
            for (int64_t k = 0; k <= n; ++k) {
                const double got = window_log_probability(m, 0, k, n);
                INFO("mean " << mean << " rho " << rho << " k " << k << " n " << n);
                CHECK(got == Approx(static_cast<double>(rising_form(mean, rho, k, n)))
                                 .epsilon(1e-13)
                                 .margin(1e-13));
                const double p = std::exp(got);
                sum += p;
                first += static_cast<double>(k) * p;
                second += static_cast<double>(k * k) * p;
            }
            // A distribution over k with mean n m and variance n m (1 - m)(1 + (n - 1) rho) (the
            // beta-binomial's moments with rho = 1/(alpha + beta + 1); profile.hpp states them
            // for the window's GC fraction).
            const double dn = static_cast<double>(n);
            CHECK(sum == Approx(1).epsilon(1e-12));
            CHECK(first == Approx(dn * mean).epsilon(1e-11));
            CHECK(second - first * first ==
                  Approx(dn * mean * (1 - mean) * (1 + (dn - 1) * rho)).epsilon(1e-9));
        }
    }
    // Windows of real size, down to dispersions near the binomial: lgamma differences of numbers
    // near n log(1/rho) lose up to 1e-3 nats here; the result must keep 1e-10.
    for (double rho : {1e-2, 1e-4, 1e-6, 1e-8, 1e-10, 1e-12}) {
        const Model m = single_state(0.41, rho, 20000);
        for (int64_t k : {0, 1, 7900, 8200, 12000, 20000}) {
            INFO("rho " << rho << " k " << k);
            const double want = static_cast<double>(rising_form(0.41, rho, k, 20000));
            CHECK(window_log_probability(m, 0, k, 20000) ==
                  Approx(want).epsilon(1e-13).margin(1e-10));
        }
    }
    // No known base: probability 1 whatever the state.
    CHECK(window_log_probability(single_state(0.2, 0.3), 0, 0, 0) == 0.0);
}

TEST_CASE("window counts and scaled emission rows", "[window]") {
    const Model m = compile(parse_profile(window_profile().dump(), "w.json"));
    // windows of 7: GC 3 of 7 | all unknown | lowercase and IUPAC | short last window
    const Contig c = test::contig_from(
        "ACGTGAA"
        "NNNNNNN"
        "ccRNtaS"
        "GG");
    const std::vector<WindowCount> want = {{3, 7, {}}, {0, 0, {}}, {2, 4, {}}, {2, 2, {}}};
    REQUIRE(m.positions(c.length) == 4);
    for (int64_t t = 0; t < 4; ++t) {
        INFO("window " << t);
        CHECK(window_count(m, c, t).gc == want[t].gc);
        CHECK(window_count(m, c, t).known == want[t].known);
    }
    const int S = m.states;
    std::vector<uint8_t> known(4);
    std::vector<double> rows(4 * S);
    const double removed = fill_window_emissions(m, c, 0, 4, known.data(), rows.data());
    double tops = 0;
    for (int64_t t = 0; t < 4; ++t) {
        INFO("window " << t);
        CHECK(known[t] == (want[t].known > 0 ? 0 : base_unknown));
        double top = -INFINITY;
        for (int s = 0; s < S; ++s)
            top = std::max(top, window_log_probability(m, s, want[t].gc, want[t].known));
        tops += want[t].known > 0 ? top : 0;
        double largest = 0;
        for (int s = 0; s < S; ++s) {
            const double expected =
                want[t].known > 0
                    ? std::exp(window_log_probability(m, s, want[t].gc, want[t].known) - top)
                    : 1.0;
            CHECK(rows[t * S + s] == Approx(expected).epsilon(1e-14));
            largest = std::max(largest, rows[t * S + s]);
            // chain copies carry their profile state's distribution
            CHECK(rows[t * S + s] == rows[t * S + (m.profile_state[s] == 0   ? 0
                                                   : m.profile_state[s] == 1 ? 2
                                                                             : 4)]);
        }
        CHECK(largest == 1.0);
    }
    CHECK(removed == Approx(tops).epsilon(1e-14));
    // A later block starts at its own window: it leaves out window 0's factor (window 1 has none).
    double top0 = -INFINITY;
    for (int s = 0; s < S; ++s) top0 = std::max(top0, window_log_probability(m, s, 3, 7));
    const double tail = fill_window_emissions(m, c, 2, 2, known.data(), rows.data());
    CHECK(known[0] == 0);
    CHECK(tail == Approx(removed - top0).epsilon(1e-14));
}

TEST_CASE("region_view: one state per region, names and report flags kept", "[window]") {
    const Model m = compile(parse_profile(window_profile().dump(), "w.json"));
    const Model v = region_view(m);
    CHECK(v.states == 2);
    CHECK(v.window == 0);
    CHECK(v.state_names == std::vector<std::string>{"at", "gc"});
    CHECK(v.region_names == m.region_names);
    CHECK(v.region_report == m.region_report);
    CHECK(v.region_of_state == std::vector<int>{0, 1});
}

TEST_CASE("WindowExpander hands every base its window's region sums", "[window]") {
    const Model m = compile(parse_profile(window_profile().dump(), "w.json"));
    const int S = m.states;  // 2 + 2 chain copies in "at", 1 in "gc"
    REQUIRE(S == 5);
    // Longer than the adapter's 65,536-base blocks, with windows across their borders and a
    // short last window.
    std::mt19937_64 rng(11);
    std::string text;
    for (int i = 0; i < 140003; ++i) text += "ACGTN"[rng() % 5];
    const Contig c = test::contig_from(text);
    const int64_t W = m.positions(c.length);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    std::vector<double> window_post(static_cast<size_t>(W) * S);
    for (int64_t t = 0; t < W; ++t) {
        double sum = 0;
        for (int s = 0; s < S; ++s) sum += window_post[t * S + s] = u(rng);
        for (int s = 0; s < S; ++s) window_post[t * S + s] /= sum;
    }
    const auto send = [&](DecodeSink& sink, int64_t first, int64_t count) {
        BlockView v;
        v.begin = first;
        v.size = count;
        v.states = S;
        v.posterior = window_post.data() + first * S;
        v.window = m.window;
        sink.block(v);
    };
    const auto check_bases = [&](const Capture& got, int64_t first_base, int64_t end_base) {
        REQUIRE(got.states == 2);
        REQUIRE(static_cast<int64_t>(got.bases.size()) == end_base - first_base);
        int64_t next = first_base;  // blocks tile the bases in order
        for (const auto& [b, n] : got.blocks) {
            CHECK(b == next);
            CHECK(n <= 65536);
            next = b + n;
        }
        CHECK(next == end_base);
        double worst = 0;
        int64_t wrong_bases = 0;
        for (int64_t i = first_base; i < end_base; ++i) {
            const int64_t t = i / 7, row = i - first_base;
            // region sums written out: "at" = states 0..3, "gc" = state 4
            const double at = window_post[t * S] + window_post[t * S + 1] + window_post[t * S + 2] +
                              window_post[t * S + 3];
            worst = std::max(worst, std::abs(got.posterior[row * 2] - at));
            worst = std::max(worst, std::abs(got.posterior[row * 2 + 1] - window_post[t * S + 4]));
            wrong_bases += got.bases[row] != c.base(i);
        }
        CHECK(worst <= 1e-15);
        CHECK(wrong_bases == 0);
    };

    Capture whole;
    {
        WindowExpander x(m, whole);
        x.begin_contig(c);
        send(x, 0, 9000);  // ends inside an adapter block
        send(x, 9000, W - 9000);
        x.end_contig(c, DecodeResult{});
    }
    CHECK(whole.contigs_begun == 1);
    CHECK(whole.contigs_ended == 1);
    check_bases(whole, 0, c.length);

    // A fork sees a later span into its own sink; join appends it to the original's.
    Capture first;
    WindowExpander x(m, first);
    x.begin_contig(c);
    send(x, 0, 100);
    auto later = x.fork();
    REQUIRE(later);
    later->begin_contig(c);
    send(*later, 100, W - 100);
    x.join(*later);
    check_bases(first, 0, c.length);

    NoFork plain;
    CHECK(WindowExpander(m, plain).fork() == nullptr);
    CHECK_THROWS_AS(WindowExpander(compile(load_profile("cpg-island")), plain), InternalError);
}

TEST_CASE("window decoding equals enumeration over all state paths", "[window][decode]") {
    // Oracle: every S^N path over the windows of a contig without chains, its probability from
    // the profile and the rising-factorial form of the beta-binomial (no tidemark emission code).
    json d = window_profile();
    d["regions"][0].erase("min_length");
    d["regions"][1]["report"] = true;
    const Profile p = parse_profile(d.dump(), "w.json");
    const Model m = compile(p);
    const int S = m.states;
    REQUIRE(S == 3);
    // 7 windows: varied GC, an all-unknown window, a short last window
    const std::string text =
        "GCGCGCA"
        "ATATATT"
        "NNNNNNN"
        "GGCCGGC"
        "AcgTnAT"
        "TTTTTTT"
        "GCA";
    const Contig c = test::contig_from(text);
    const int64_t N = m.positions(c.length);
    REQUIRE(N == 7);
    std::vector<double> log_e(N * S);
    for (int64_t t = 0; t < N; ++t) {
        int64_t k = 0, n = 0;
        for (int64_t i = t * 7; i < std::min<int64_t>((t + 1) * 7, c.length); ++i) {
            const char ch = static_cast<char>(std::toupper(text[i]));
            n += ch == 'A' || ch == 'C' || ch == 'G' || ch == 'T';
            k += ch == 'C' || ch == 'G';
        }
        for (int s = 0; s < S; ++s)
            log_e[t * S + s] = n == 0 ? 0.0
                                      : static_cast<double>(rising_form(
                                            p.states[s].gc.mean, p.states[s].gc.dispersion, k, n));
    }
    std::vector<int> path(N, 0);
    std::vector<double> log_paths, post(N * S, 0.0);
    std::vector<std::vector<int>> paths;
    for (;;) {
        double lp = std::log(p.initial[path[0]]) + log_e[path[0]];
        for (int64_t t = 1; t < N; ++t)
            lp += std::log(p.transitions[path[t - 1]][path[t]]) + log_e[t * S + path[t]];
        log_paths.push_back(lp);
        paths.push_back(path);
        int64_t t = 0;
        while (t < N && ++path[t] == S) path[t++] = 0;
        if (t == N) break;
    }
    const double best = *std::max_element(log_paths.begin(), log_paths.end());
    double total = 0;
    for (double lp : log_paths) total += std::exp(lp - best);
    const double log_total = best + std::log(total);
    for (size_t i = 0; i < paths.size(); ++i)
        for (int64_t t = 0; t < N; ++t)
            post[t * S + paths[i][t]] += std::exp(log_paths[i] - log_total);

    for (int64_t block : {0, 1, 3}) {
        INFO("block " << block);
        struct Windows : DecodeSink {
            std::vector<double> posterior;
            void block(const BlockView& v) override {
                posterior.insert(posterior.end(), v.posterior, v.posterior + v.size * v.states);
            }
        } got;
        PosteriorDecoder dec(m, DecoderOptions{block});
        const DecodeResult r = dec.run(c, got);
        CHECK(r.log_likelihood == Approx(log_total).epsilon(1e-13));
        REQUIRE(got.posterior.size() == post.size());
        for (size_t i = 0; i < post.size(); ++i)
            CHECK(got.posterior[i] == Approx(post[i]).margin(1e-12));
        ViterbiDecoder vit(m, DecoderOptions{block});
        const DecodeResult rv = vit.run(c, got);
        CHECK(rv.log_likelihood == Approx(best).epsilon(1e-13));
    }
}
