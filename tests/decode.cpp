// Decoder tests against exact oracles: exhaustive enumeration over all state paths, and the
// published umbrella-world example.
#include "tidemark/decode.hpp"

#include <catch2/catch.hpp>
#include <cmath>
#include <functional>

#include "test_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/profile.hpp"

using namespace tidemark;

namespace {

// Collects every posterior row of a run.
struct Collect : DecodeSink {
    std::vector<double> posterior;
    std::vector<int64_t> starts;
    void block(const BlockView& v) override {
        starts.push_back(v.begin);
        posterior.insert(posterior.end(), v.posterior, v.posterior + v.size * v.states);
    }
};

// Emission probability written directly from the profile format's definition, independently
// of Model::emission_prob: unknown base -> 1; fewer than k known bases immediately before t ->
// mean of the state's rows; otherwise the row of the k preceding bases, oldest most significant.
double oracle_emission(const Profile& p, int s, const std::string& seq, size_t t) {
    const std::string acgt = "ACGT";
    const size_t b = acgt.find(static_cast<char>(std::toupper(seq[t])));
    if (b == std::string::npos) return 1.0;
    const StateSpec& st = p.states[s];
    const size_t k = static_cast<size_t>(st.order);
    bool full = t >= k;
    size_t row = 0;
    for (size_t j = t - std::min(t, k); full && j < t; ++j) {
        const size_t c = acgt.find(static_cast<char>(std::toupper(seq[j])));
        if (c == std::string::npos) full = false;
        row = row * 4 + c;
    }
    if (full) return st.emissions[row][b];
    double mean = 0;
    for (const auto& r : st.emissions) mean += r[b];
    return mean / static_cast<double>(st.emissions.size());
}

struct Enumeration {
    double total = 0;
    std::vector<double> posterior;  // n x S
    double best = -1;
    std::vector<int> best_path;
};

Enumeration enumerate_paths(const Profile& p, const std::string& seq) {
    const int S = static_cast<int>(p.states.size());
    const size_t n = seq.size();
    Enumeration out;
    out.posterior.assign(n * S, 0.0);
    std::vector<int> path(n, 0);
    for (;;) {
        double prob = p.initial[path[0]] * oracle_emission(p, path[0], seq, 0);
        for (size_t t = 1; t < n; ++t)
            prob *= p.transitions[path[t - 1]][path[t]] * oracle_emission(p, path[t], seq, t);
        out.total += prob;
        for (size_t t = 0; t < n; ++t) out.posterior[t * S + path[t]] += prob;
        if (prob > out.best) {
            out.best = prob;
            out.best_path = path;
        }
        size_t t = 0;  // next path in odometer order
        while (t < n && ++path[t] == S) path[t++] = 0;
        if (t == n) break;
    }
    for (auto& x : out.posterior) x /= out.total;
    return out;
}

std::string random_sequence(std::mt19937_64& rng, size_t n) {
    const std::string alphabet =
        "ACGTACGTACGTacgtNR";  // mostly bases, some lowercase, some unknown
    std::string s;
    for (size_t i = 0; i < n; ++i) s += alphabet[rng() % alphabet.size()];
    return s;
}

// Posterior and Viterbi decoding of c with each block size against the enumeration: posteriors
// and log-likelihoods within 1e-12, and with check_path the Viterbi path itself (only where the
// best path is unique).
void check_decoders_against(const Model& m, const Contig& c, const Enumeration& truth,
                            std::initializer_list<int64_t> blocks, bool check_path) {
    const int S = m.states;
    for (int64_t block : blocks) {
        DecoderOptions opt;
        opt.block_size = block;
        PosteriorDecoder dec(m, opt);
        Collect sink;
        const DecodeResult r = dec.run(c, sink);
        REQUIRE(sink.posterior.size() == truth.posterior.size());
        for (size_t i = 0; i < truth.posterior.size(); ++i)
            REQUIRE(sink.posterior[i] == Approx(truth.posterior[i]).margin(1e-12));
        REQUIRE(r.log_likelihood == Approx(std::log(truth.total)).epsilon(0).margin(1e-12));

        ViterbiDecoder vit(m, opt);
        Collect vsink;
        const DecodeResult vr = vit.run(c, vsink);
        REQUIRE(vr.log_likelihood == Approx(std::log(truth.best)).epsilon(0).margin(1e-12));
        if (check_path)
            for (size_t t = 0; t < truth.best_path.size(); ++t)
                REQUIRE(vsink.posterior[t * S + truth.best_path[t]] == 1.0);
    }
}

}  // namespace

TEST_CASE("posterior decoding equals exhaustive enumeration over all state paths", "[decode]") {
    // Oracle: brute-force sum over every S^n state path of the joint probability, computed
    // from the profile definition alone (no tidemark decoding code).
    std::mt19937_64 rng(20261201);
    int cases = 0;
    for (int trial = 0; trial < 60; ++trial) {
        const int S = 2 + trial % 2;
        const int R = 1 + trial % 2;
        const std::vector<int> orders = {trial % 3, (trial + 1) % 3, (trial + 2) % 3};
        const Profile p = test::random_profile(rng, S, R, orders);
        const std::string seq = random_sequence(rng, 1 + rng() % 10);
        const Enumeration truth = enumerate_paths(p, seq);
        const Model m = compile(p);
        const Contig c = test::contig_from(seq);
        // block sizes that cut the sequence anywhere
        check_decoders_against(m, c, truth, {0, 1, 3, 4}, /*check_path=*/true);
        ++cases;
    }
    CHECK(cases == 60);
}

TEST_CASE("built-in CpG-island profiles equal exhaustive enumeration over all state paths",
          "[decode]") {
    // The default cpg-island (several background states) and the two-state textbook model, on
    // short sequences with lowercase and unknown bases: every S^n path summed from the profile
    // definition alone.
    std::mt19937_64 rng(20261202);
    for (const char* name : {"cpg-island", "cpg-island-2state"}) {
        const Profile p = load_profile(name);
        const int S = static_cast<int>(p.states.size());
        const Model m = compile(p);
        for (int trial = 0; trial < 12; ++trial) {
            const size_t n = S > 4 ? 1 + rng() % 7 : 1 + rng() % 8;
            const std::string seq = random_sequence(rng, n);
            const Enumeration truth = enumerate_paths(p, seq);
            const Contig c = test::contig_from(seq);
            check_decoders_against(m, c, truth, {0, 1, 3}, /*check_path=*/false);
        }
    }
}

TEST_CASE("exhaustive enumeration with zero transitions and emissions", "[decode]") {
    std::mt19937_64 rng(7);
    for (int trial = 0; trial < 30; ++trial) {
        const Profile p = test::random_profile(rng, 3, 2, {trial % 2, 1, 0}, true);
        const std::string seq = random_sequence(rng, 2 + rng() % 7);
        const Enumeration truth = enumerate_paths(p, seq);
        const Model m = compile(p);
        const Contig c = test::contig_from(seq);
        PosteriorDecoder dec(m, DecoderOptions{2});
        Collect sink;
        if (truth.total == 0) {
            REQUIRE_THROWS_AS(dec.run(c, sink), InputError);
            continue;
        }
        const DecodeResult r = dec.run(c, sink);
        for (size_t i = 0; i < truth.posterior.size(); ++i)
            REQUIRE(sink.posterior[i] == Approx(truth.posterior[i]).margin(1e-12));
        REQUIRE(r.log_likelihood == Approx(std::log(truth.total)).epsilon(0).margin(1e-12));
    }
}

TEST_CASE("umbrella world through the generic engine", "[decode]") {
    // Russell & Norvig, Artificial Intelligence: A Modern Approach, ch. 15 (umbrella world):
    // prior (0.5, 0.5), transitions [[0.7, 0.3], [0.3, 0.7]], P(umbrella | Rain) = 0.9,
    // P(umbrella | NoRain) = 0.2, observations u, u, not-u, u, u. As an order-0 model: base A =
    // umbrella seen, C = not seen; G and T never emitted.
    Profile p;
    p.name = "umbrella";
    p.regions = {{"rain", true, ""}, {"dry", false, ""}};
    p.states = {{"Rain", 0, 0, {{0.9, 0.1, 0.0, 0.0}}}, {"NoRain", 1, 0, {{0.2, 0.8, 0.0, 0.0}}}};
    p.initial = {0.5, 0.5};
    p.transitions = {{0.7, 0.3}, {0.3, 0.7}};
    const Model m = compile(p);
    const Contig c = test::contig_from("AACAA");
    PosteriorDecoder dec(m);
    Collect sink;
    const DecodeResult r = dec.run(c, sink);
    // Published smoothed posteriors P(Rain_t | u_1:5), printed to 4 decimals.
    const double rain[] = {0.8673, 0.8204, 0.3075, 0.8204, 0.8673};
    for (int t = 0; t < 5; ++t) CHECK(sink.posterior[t * 2] == Approx(rain[t]).margin(5e-5));
    // Likelihood of the evidence: ln P(u,u,not-u,u,u) = -3.3725 (printed to 4 decimals).
    CHECK(r.log_likelihood == Approx(-3.3725).margin(5e-5));
    // Most likely sequence: Rain, Rain, NoRain, Rain, Rain with ln P = -4.4590.
    ViterbiDecoder vit(m);
    Collect vs;
    const DecodeResult vr = vit.run(c, vs);
    const int path[] = {0, 0, 1, 0, 0};
    for (int t = 0; t < 5; ++t) CHECK(vs.posterior[t * 2 + path[t]] == 1.0);
    CHECK(vr.log_likelihood == Approx(-4.4590).margin(5e-5));
}

TEST_CASE("blocks arrive in forward order and tile the contig", "[decode]") {
    std::mt19937_64 rng(3);
    const Profile p = test::random_profile(rng, 2, 2, {1});
    const Model m = compile(p);
    const Contig c = test::contig_from(random_sequence(rng, 1000));
    PosteriorDecoder dec(m, DecoderOptions{256});
    Collect sink;
    dec.run(c, sink);
    CHECK(sink.starts == std::vector<int64_t>{0, 256, 512, 768});
    for (size_t t = 0; t < 1000; ++t)
        CHECK(sink.posterior[2 * t] + sink.posterior[2 * t + 1] == Approx(1.0).margin(1e-12));
}

TEST_CASE("long sequences do not underflow and block size does not change results", "[decode]") {
    // Reference: the same decoder with a block covering the whole sequence (no checkpoints);
    // the likelihood of n bases under an order-0 uniform model is n * ln(1/4) exactly.
    Profile p;
    p.name = "uniform";
    p.regions = {{"a", true, ""}, {"b", false, ""}};
    p.states = {{"x", 0, 0, {{0.25, 0.25, 0.25, 0.25}}}, {"y", 1, 0, {{0.25, 0.25, 0.25, 0.25}}}};
    p.initial = {0.5, 0.5};
    p.transitions = {{0.9, 0.1}, {0.2, 0.8}};
    const Model m = compile(p);
    std::mt19937_64 rng(11);
    std::string seq;
    for (int i = 0; i < 200000; ++i) seq += "ACGT"[rng() % 4];
    const Contig c = test::contig_from(seq);
    PosteriorDecoder dec(m, DecoderOptions{1000});
    Collect sink;
    const DecodeResult r = dec.run(c, sink);
    CHECK(r.log_likelihood == Approx(200000 * std::log(0.25)).epsilon(1e-12));
    // Emissions are equal, so posteriors are the Markov chain's marginals from the initial
    // distribution: after many steps the stationary distribution (2/3, 1/3).
    CHECK(sink.posterior[2 * 150000] == Approx(2.0 / 3.0).epsilon(1e-9));
}

TEST_CASE("a sequence impossible under the profile names contig and position", "[decode]") {
    const Model m = compile(test::profile_without_g());
    const Contig c = test::contig_from("ACACAGAC", "chrQ");
    PosteriorDecoder dec(m);
    Collect sink;
    try {
        dec.run(c, sink);
        FAIL("expected an error");
    } catch (const InputError& e) {
        const std::string msg = e.what();
        CHECK(msg.find("chrQ") != std::string::npos);
        CHECK(msg.find("position 6") != std::string::npos);
    }
}
