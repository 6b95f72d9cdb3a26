// Simulation tests: the generator against published test vectors, integer sampling by hand,
// formatters on hand-made blocks, and 5 Mbp of output against the model within sampling error.
#include "tidemark/simulate.hpp"

#include <array>
#include <catch2/catch.hpp>
#include <cmath>

#include "rng.hpp"
#include "test_util.hpp"
#include "tidemark/error.hpp"

using namespace tidemark;

namespace {

// Counts, from what the simulator hands out, everything the model specifies. The rules used to
// find each base's context (k preceding known bases, none across an N or a contig start) are
// the profile format's definition, re-implemented here.
struct Counter : SimulationSink {
    explicit Counter(const Model& m) : model(m) {
        initial.assign(m.states, 0);
        transitions.assign(static_cast<size_t>(m.states) * m.states, 0);
        emissions.assign(m.emission.size(), 0);
    }
    void begin_contig(const std::string&, int64_t) override {
        prev = -1;
        history.clear();
        ++contigs;
    }
    void block(const SimulatedBlock& b) override {
        for (int64_t t = 0; t < b.size; ++t) {
            const int s = b.states[t];
            if (prev < 0)
                ++initial[s];
            else
                ++transitions[static_cast<size_t>(prev) * model.states + s];
            prev = s;
            const uint8_t base = b.bases[t];
            ++bases;
            if (b.begin + t == 0 && base == base_unknown) ++gap_starts;
            if (base == base_unknown) {
                ++unknown;
                if (!in_gap) ++gap_runs;
                in_gap = true;
                history.clear();
                continue;
            }
            in_gap = false;
            const size_t k = static_cast<size_t>(model.order_of_state[s]);
            size_t row = size_t{1} << (2 * k);  // the mean row
            if (history.size() >= k) {
                row = 0;
                for (size_t j = history.size() - k; j < history.size(); ++j)
                    row = row * 4 + history[j];
            }
            ++emissions[model.emission_offset[s] + row * 4 + base];
            history.push_back(base);
            if (history.size() > 8) history.erase(history.begin());
        }
    }
    void end_contig() override { in_gap = false; }

    const Model& model;
    std::vector<int64_t> initial, transitions, emissions;
    std::vector<uint8_t> history;
    int prev = -1;
    bool in_gap = false;
    int64_t contigs = 0, bases = 0, unknown = 0, gap_runs = 0, gap_starts = 0;
};

// Every draw of row i is fresh randomness, so given n draws from a row the count of outcome j is
// Binomial(n, p_j). A cell passes when |count - n p| <= 5 sd (two-sided normal tail 5.7e-7 per
// cell; with the few thousand cells checked below, a false alarm has probability < 1e-3, and the
// seed is fixed anyway). Outcomes of probability 0 must never occur.
struct RowCheck {
    int cells = 0, failures = 0;
    void row(const int64_t* counts, const double* p, int n_outcomes, const std::string& what) {
        int64_t n = 0;
        for (int j = 0; j < n_outcomes; ++j) n += counts[j];
        if (n == 0) return;
        for (int j = 0; j < n_outcomes; ++j) {
            ++cells;
            const double expected = static_cast<double>(n) * p[j];
            const double sd = std::sqrt(static_cast<double>(n) * p[j] * (1 - p[j]));
            const bool ok = p[j] == 0
                                ? counts[j] == 0
                                : std::abs(static_cast<double>(counts[j]) - expected) <= 5 * sd;
            if (!ok) {
                ++failures;
                UNSCOPED_INFO(what << " outcome " << j << ": count " << counts[j] << " of " << n
                                   << ", expected " << expected << " +- " << sd);
            }
        }
    }
};

struct StringSink {
    std::string text;
    TextWriter writer() {
        return [this](std::string_view s) { text.append(s); };
    }
};

StateSpec state(const std::string& name, int region, int order,
                std::vector<std::array<double, 4>> rows) {
    StateSpec s;
    s.name = name;
    s.region = region;
    s.order = order;
    s.emissions = std::move(rows);
    return s;
}

RegionSpec region(const std::string& name, bool report) {
    RegionSpec r;
    r.name = name;
    r.report = report;
    return r;
}

Model test_model() {
    std::mt19937_64 rng(20240611);  // only to pick the model's numbers
    return compile(test::random_profile(rng, 3, 2, {0, 2, 1}, true));
}

}  // namespace

TEST_CASE("xoshiro256** reproduces the published test vectors", "[simulate][rng]") {
    // State {1, 2, 3, 4}: the first ten outputs as listed in the test suite of the Rust crate
    // rand_xoshiro (Xoshiro256StarStar) and in other ports of Blackman & Vigna's reference C
    // code; recomputed independently with a few lines of Python big-integer arithmetic.
    detail::Xoshiro256ss g(1, 2, 3, 4);
    const uint64_t expected[] = {11520ull,
                                 0ull,
                                 1509978240ull,
                                 1215971899390074240ull,
                                 1216172134540287360ull,
                                 607988272756665600ull,
                                 16172922978634559625ull,
                                 8476171486693032832ull,
                                 10595114339597558777ull,
                                 2904607092377533576ull};
    for (uint64_t e : expected) CHECK(g.next() == e);
}

TEST_CASE("SplitMix64 reproduces its known first outputs from state 0", "[simulate][rng]") {
    // From memory (widely quoted for Vigna's splitmix64.c), recomputed with Python big integers.
    uint64_t state = 0;
    CHECK(detail::splitmix64(state) == 0xe220a8397b1dcdafull);
    CHECK(detail::splitmix64(state) == 0x6e789e6aa1b965f4ull);
    CHECK(detail::splitmix64(state) == 0x06c45d188009454full);
}

TEST_CASE("integer thresholds split the 2^53 grid exactly", "[simulate][rng]") {
    // Hand computation: cumulative sums 0.25, 0.25, 0.75, 1 times 2^53 = 2^51, 2^51, 3*2^51, 2^53.
    const uint64_t q = uint64_t{1} << 51;
    const double p[] = {0.25, 0.0, 0.5, 0.25};
    uint64_t t[4];
    detail::categorical_thresholds(p, 4, t);
    CHECK(t[0] == q);
    CHECK(t[1] == q);
    CHECK(t[2] == 3 * q);
    CHECK(t[3] == 4 * q);
    CHECK(detail::sample_categorical(t, 4, 0) == 0);
    CHECK(detail::sample_categorical(t, 4, q - 1) == 0);
    CHECK(detail::sample_categorical(t, 4, q) == 2);  // the zero-probability outcome is skipped
    CHECK(detail::sample_categorical(t, 4, 3 * q - 1) == 2);
    CHECK(detail::sample_categorical(t, 4, 3 * q) == 3);
    CHECK(detail::sample_categorical(t, 4, 4 * q - 1) == 3);

    // A trailing zero can never be drawn, even from the largest r; a leading zero neither.
    const double tail[] = {0.5, 0.5, 0.0};
    detail::categorical_thresholds(tail, 3, t);
    CHECK(detail::sample_categorical(t, 3, detail::unit53 - 1) == 1);
    const double head[] = {0.0, 1.0};
    detail::categorical_thresholds(head, 2, t);
    CHECK(detail::sample_categorical(t, 2, 0) == 1);

    // Rows that sum to 1 only within rounding still end exactly at 2^53.
    const double third[] = {1.0 / 3, 1.0 / 3, 1.0 / 3};
    detail::categorical_thresholds(third, 3, t);
    CHECK(t[2] == detail::unit53);
}

TEST_CASE("FASTA formatter wraps lines and writes N for unknown bases", "[simulate]") {
    const uint8_t bases[] = {0, 1, 2, 3, 4, 0, 1};
    const int states[7] = {};
    for (auto [width, expected] :
         std::vector<std::pair<int, std::string>>{{4, ">x\nACGT\nNAC\n"},
                                                  {7, ">x\nACGTNAC\n"},
                                                  {0, ">x\nACGTNAC\n"},
                                                  {3, ">x\nACG\nTNA\nC\n"}}) {
        StringSink out;
        FastaFormatter f(out.writer(), width);
        f.begin_contig("x", 7);
        // Split across two blocks so that the line position carries over.
        f.block({0, 3, states, bases});
        f.block({3, 4, states + 3, bases + 3});
        f.end_contig();
        CHECK(out.text == expected);
    }
    StringSink out;
    FastaFormatter f(out.writer(), 2);
    f.begin_contig("a", 2);
    f.block({0, 2, states, bases});
    f.end_contig();
    f.begin_contig("b", 1);
    f.block({0, 1, states, bases + 4});
    f.end_contig();
    CHECK(out.text == ">a\nAC\n>b\nN\n");  // a full last line gets no empty line after it
}

TEST_CASE("truth formatter writes maximal region runs that tile the contig", "[simulate]") {
    Profile p;
    p.name = "t";
    p.regions = {region("hot", true), region("cold", false)};
    const std::array<double, 4> uniform = {0.25, 0.25, 0.25, 0.25};
    p.states = {state("h", 0, 0, {uniform}), state("c1", 1, 0, {uniform}),
                state("c2", 1, 0, {uniform})};
    p.initial = {1, 0, 0};
    p.transitions = {{0.5, 0.5, 0}, {0, 0.5, 0.5}, {0.5, 0, 0.5}};
    const Model m = compile(p);
    // States h h c1 | c2 c2 h h (block break after position 3); c1 -> c2 stays in one region.
    const int states[] = {0, 0, 1, 2, 2, 0, 0};
    const uint8_t bases[7] = {};
    StringSink out;
    TruthFormatter f(out.writer(), m);
    f.begin_contig("chr", 7);
    f.block({0, 3, states, bases});
    f.block({3, 4, states + 3, bases + 3});
    f.end_contig();
    f.begin_contig("two", 1);
    f.block({0, 1, states + 2, bases});
    f.end_contig();
    CHECK(out.text == "chr\t0\t2\thot\nchr\t2\t5\tcold\nchr\t5\t7\thot\ntwo\t0\t1\tcold\n");
}

TEST_CASE("simulation options are validated", "[simulate]") {
    SimulateOptions o;
    CHECK_THROWS_AS(validate(o), UsageError);  // no lengths
    o.lengths = {10, 0};
    CHECK_THROWS_WITH(validate(o), Catch::Contains("entry 2"));
    o.lengths = {10};
    o.gap_fraction = 1;
    CHECK_THROWS_WITH(validate(o), Catch::Contains("--gaps"));
    o.gap_fraction = 0.6;
    o.gap_mean_length = 1;  // known runs would average 1 * 0.4 / 0.6 < 1 base
    CHECK_THROWS_WITH(validate(o), Catch::Contains("too large"));
    o.gap_fraction = 0.5;  // exactly L / (L + 1): alternating single bases, allowed
    CHECK_NOTHROW(validate(o));
    o.gap_mean_length = 0.5;
    CHECK_THROWS_WITH(validate(o), Catch::Contains("--gap-length"));
    o.gap_mean_length = 10;
    o.name_prefix = "a b";
    CHECK_THROWS_WITH(validate(o), Catch::Contains("--prefix"));
}

TEST_CASE("the same seed gives the same simulation, another seed another", "[simulate]") {
    const Model m = test_model();
    SimulateOptions o;
    o.lengths = {70000, 12345};  // more than one block
    o.gap_fraction = 0.05;
    o.gap_mean_length = 20;
    const auto run = [&](uint64_t seed) {
        o.seed = seed;
        StringSink fasta, truth;
        FastaFormatter f(fasta.writer(), 60);
        TruthFormatter t(truth.writer(), m);
        struct Both : SimulationSink {
            SimulationSink *a, *b;
            void begin_contig(const std::string& n, int64_t l) override {
                a->begin_contig(n, l), b->begin_contig(n, l);
            }
            void block(const SimulatedBlock& x) override { a->block(x), b->block(x); }
            void end_contig() override { a->end_contig(), b->end_contig(); }
        } both;
        both.a = &f;
        both.b = &t;
        simulate(m, o, both);
        return fasta.text + truth.text;
    };
    const std::string first = run(42);
    CHECK(first == run(42));
    CHECK(first != run(43));
    CHECK(first.rfind(">sim1\n", 0) == 0);
    CHECK(first.find(">sim2\n") != std::string::npos);
}

TEST_CASE("5 Mbp of simulation follow the model within sampling error", "[simulate][statistics]") {
    const Model m = test_model();
    SimulateOptions o;
    // 5,000 contigs of 1 kb: 5,000 draws of the initial state, and many mean-row emissions at
    // contig starts and after the gaps, besides 5 Mbp of transitions and full-context emissions.
    o.lengths.assign(5000, 1000);
    o.seed = 7;
    o.gap_fraction = 0.02;
    o.gap_mean_length = 10;
    Counter c(m);
    simulate(m, o, c);
    REQUIRE(c.bases == 5000000);
    REQUIRE(c.contigs == 5000);

    RowCheck check;
    check.row(c.initial.data(), m.initial.data(), m.states, "initial");
    for (int s = 0; s < m.states; ++s)
        check.row(c.transitions.data() + static_cast<size_t>(s) * m.states,
                  m.transitions.data() + static_cast<size_t>(s) * m.states, m.states,
                  "transitions from " + m.state_names[s]);
    int64_t mean_row_draws = 0;
    for (int s = 0; s < m.states; ++s) {
        const size_t rows = (size_t{1} << (2 * m.order_of_state[s])) + 1;
        for (size_t r = 0; r < rows; ++r) {
            const size_t at = m.emission_offset[s] + r * 4;
            check.row(c.emissions.data() + at, m.emission.data() + at, 4,
                      m.state_names[s] + " emission row " + std::to_string(r));
            if (r + 1 == rows && m.order_of_state[s] > 0)
                for (int b = 0; b < 4; ++b) mean_row_draws += c.emissions[at + b];
        }
    }
    CHECK(check.failures == 0);
    CHECK(check.cells > 100);
    CHECK(mean_row_draws > 5000);  // the mean rows were exercised, not just present

    // Gap fraction: the known/unknown chain is an alternating renewal process with geometric
    // N runs (mean L, variance L(L-1)) and known runs (mean M = L(1-f)/f, variance M(M-1)).
    // By the renewal-reward central limit theorem the fraction of N over n positions has
    // variance about (M^2 var_N + L^2 var_M) / (L + M)^3 / n; 5,000 independent contigs of 1 kb
    // make it a little larger at contig starts, so allow 6 sd.
    const double L = o.gap_mean_length, f = o.gap_fraction, M = L * (1 - f) / f;
    const double var = (M * M * L * (L - 1) + L * L * M * (M - 1)) / std::pow(L + M, 3) / 5e6;
    const double fraction = static_cast<double>(c.unknown) / 5e6;
    INFO("N fraction " << fraction << ", sd " << std::sqrt(var));
    CHECK(std::abs(fraction - f) <= 6 * std::sqrt(var));
    // The gap chain starts from its stationary distribution: Binomial(5000, f) contigs start
    // inside a gap (mean 100, sd 9.9).
    CHECK(std::abs(static_cast<double>(c.gap_starts) - 5000 * f) <=
          5 * std::sqrt(5000 * f * (1 - f)));
}

TEST_CASE("bases after an N and at a contig start come from the mean row",
          "[simulate][statistics]") {
    // One order-1 state whose rows are deterministic: after A always C, after C, G or T always A.
    // With a full context the sequence alternates A and C. The mean row is the average of the
    // four rows, (0.75, 0.25, 0, 0): a base with no known predecessor is A with probability 3/4.
    // Continuing the context across an N instead would give A and C equally often.
    Profile p;
    p.name = "alternating";
    p.regions = {region("only", true)};
    p.states = {state("s", 0, 1, {{0, 1, 0, 0}, {1, 0, 0, 0}, {1, 0, 0, 0}, {1, 0, 0, 0}})};
    p.initial = {1};
    p.transitions = {{1}};
    const Model m = compile(p);
    SimulateOptions o;
    o.lengths.assign(2000, 500);
    o.gap_fraction = 0.05;
    o.gap_mean_length = 5;
    o.seed = 3;
    struct FirstBases : SimulationSink {
        int64_t fresh = 0, fresh_a = 0, violations = 0;
        uint8_t prev = base_unknown;
        void begin_contig(const std::string&, int64_t) override { prev = base_unknown; }
        void block(const SimulatedBlock& b) override {
            for (int64_t t = 0; t < b.size; ++t) {
                const uint8_t x = b.bases[t];
                if (x != base_unknown && prev == base_unknown) {
                    ++fresh;
                    fresh_a += (x == base_a);
                } else if (x != base_unknown) {
                    violations += (x != (prev == base_a ? base_c : base_a));
                }
                prev = x;
            }
        }
    } sink;
    simulate(m, o, sink);
    CHECK(sink.violations == 0);
    REQUIRE(sink.fresh > 10000);  // about 2,000 contig starts + 1 Mbp / (5 + 95) = 10,000 gap ends
    // Binomial(fresh, 3/4): allow 5 sd.
    const double n = static_cast<double>(sink.fresh);
    INFO("fresh bases " << sink.fresh << ", of which A " << sink.fresh_a);
    CHECK(std::abs(static_cast<double>(sink.fresh_a) - 0.75 * n) <= 5 * std::sqrt(n * 0.75 * 0.25));
}

TEST_CASE("long gap runs have the documented mean length", "[simulate][statistics]") {
    const Model m = test_model();
    SimulateOptions o;
    o.lengths = {5000000};
    o.seed = 11;
    o.gap_fraction = 0.1;
    o.gap_mean_length = 50;
    Counter c(m);
    simulate(m, o, c);
    // Runs are geometric with mean 50 (sd about 49.5); the number of runs is about f n / L =
    // 10,000, so their mean length has sd about 49.5 / sqrt(10,000) = 0.5: allow 5 sd = 2.5.
    // The run count itself is a renewal count with sd about sqrt(n (var_N + var_M)) /
    // (L + M)^1.5 (about 70 here); allow 5 sd.
    const double L = o.gap_mean_length, f = o.gap_fraction, M = L * (1 - f) / f;
    const double runs_expected = 5e6 / (L + M);
    const double runs_sd = std::sqrt(5e6 * (L * (L - 1) + M * (M - 1))) / std::pow(L + M, 1.5);
    const double mean_run = static_cast<double>(c.unknown) / static_cast<double>(c.gap_runs);
    INFO("runs " << c.gap_runs << " (expected " << runs_expected << " +- " << runs_sd
                 << "), mean length " << mean_run);
    CHECK(std::abs(static_cast<double>(c.gap_runs) - runs_expected) <= 5 * runs_sd);
    CHECK(std::abs(mean_run - L) <= 2.5);
}
