// M-step against hand computation (normalised counts with pseudocounts, structural zeros, tie
// pooling, freezing, parameter counts) and the chain row against a brute-force search.
#include <catch2/catch.hpp>
#include <cmath>

#include "test_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/train.hpp"

using namespace tidemark;
using Catch::Matchers::Contains;

namespace {

// Two order-0 states, one region each; state b cannot emit A (a structural zero).
Profile two_states() {
    return parse_profile(R"({
      "format": "tidemark-profile/1", "name": "two",
      "regions": [{"name": "ra", "report": true}, {"name": "rb", "report": false}],
      "states": [{"name": "a", "region": "ra", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]},
                 {"name": "b", "region": "rb", "order": 0, "emissions": [[0,0.3,0.3,0.4]]}],
      "initial": {"a": 0.5, "b": 0.5},
      "transitions": {"a": {"a": 0.9, "b": 0.1}, "b": {"b": 0.8, "a": 0.2}}})",
                         "two");
}

TrainingCounts hand_counts(const Profile& p) {
    TrainingCounts c = TrainingCounts::zero(p);
    c.initial = {3, 1};
    c.transitions = {{6, 2}, {1, 3}};
    c.emissions[0][0] = {4, 3, 2, 1};
    c.emissions[1][0] = {0, 5, 5, 0};
    return c;
}

FreezeMask none(const Profile& p) {
    return resolve_freeze(Freeze{}, p);
}

}  // namespace

TEST_CASE("M-step: normalised counts without pseudocounts (hand computation)", "[train]") {
    const Profile p = two_states();
    const Profile q = maximise(p, p, hand_counts(p), none(p), MStepOptions{0.0});
    // initial 3/4, 1/4; rows 6/8, 2/8 and 1/4, 3/4; emissions 4/10.. and 5/10, 5/10.
    CHECK(q.initial[0] == Approx(0.75));
    CHECK(q.initial[1] == Approx(0.25));
    CHECK(q.transitions[0][0] == Approx(0.75));
    CHECK(q.transitions[0][1] == Approx(0.25));
    CHECK(q.transitions[1][0] == Approx(0.25));
    CHECK(q.transitions[1][1] == Approx(0.75));
    CHECK(q.states[0].emissions[0][0] == Approx(0.4));
    CHECK(q.states[0].emissions[0][3] == Approx(0.1));
    CHECK(q.states[1].emissions[0][0] == 0);
    CHECK(q.states[1].emissions[0][1] == Approx(0.5));
    CHECK(q.states[1].emissions[0][3] == 0);
}

TEST_CASE("M-step: pseudocounts go to every entry except structural zeros (hand computation)",
          "[train]") {
    const Profile p = two_states();
    const Profile q = maximise(p, p, hand_counts(p), none(p), MStepOptions{1.0});
    // initial (3+1)/(4+2), (1+1)/6; row a (6+1)/10, (2+1)/10; row b (1+1)/6, (3+1)/6;
    // emissions a (4+1)/14 ... (1+1)/14; b has no A: (0, 5+1, 5+1, 0+1)/13.
    CHECK(q.initial[0] == Approx(4.0 / 6));
    CHECK(q.transitions[0][0] == Approx(0.7));
    CHECK(q.transitions[1][1] == Approx(4.0 / 6));
    CHECK(q.states[0].emissions[0][0] == Approx(5.0 / 14));
    CHECK(q.states[0].emissions[0][3] == Approx(2.0 / 14));
    CHECK(q.states[1].emissions[0][0] == 0);
    CHECK(q.states[1].emissions[0][1] == Approx(6.0 / 13));
    CHECK(q.states[1].emissions[0][3] == Approx(1.0 / 13));
    // log-prior: the sum of ln(theta) over the 2 + 4 + 4 + 3 free entries, written out.
    const double want = std::log(4.0 / 6) + std::log(2.0 / 6) + std::log(0.7) + std::log(0.3) +
                        std::log(2.0 / 6) + std::log(4.0 / 6) + std::log(5.0 / 14) +
                        std::log(4.0 / 14) + std::log(3.0 / 14) + std::log(2.0 / 14) +
                        2 * std::log(6.0 / 13) + std::log(1.0 / 13);
    CHECK(log_prior(p, q, none(p), 1.0) == Approx(want));
    CHECK(log_prior(p, q, none(p), 0.0) == 0);
    // Free parameters: initial 1, rows 1 + 1, emissions 3 + 2 (b has three non-zero entries).
    CHECK(free_parameters(p, none(p)) == 8);
}

TEST_CASE("M-step: frozen parameters keep their values", "[train]") {
    const Profile p = two_states();
    Freeze f;
    parse_freeze("initial", f);
    parse_freeze("transitions:b", f);
    parse_freeze("emissions:a", f);
    const FreezeMask mask = resolve_freeze(f, p);
    const Profile q = maximise(p, p, hand_counts(p), mask, MStepOptions{0.0});
    CHECK(q.initial == p.initial);
    CHECK(q.transitions[1] == p.transitions[1]);
    CHECK(q.transitions[0][0] == Approx(0.75));  // not frozen: 6/8 as above
    CHECK(q.states[0].emissions == p.states[0].emissions);
    CHECK(q.states[1].emissions[0][1] == Approx(0.5));
    // Frozen parameters are not free: 8 - initial 1 - row b 1 - emissions a 3.
    CHECK(free_parameters(p, mask) == 3);
}

TEST_CASE("--freeze words are checked", "[train]") {
    Freeze f;
    CHECK_THROWS_AS(parse_freeze("everything", f), UsageError);
    CHECK_THROWS_AS(parse_freeze("emissions:", f), UsageError);
    CHECK_THROWS_AS(parse_freeze("initial:a", f), UsageError);
    parse_freeze("emissions:nosuch", f);
    CHECK_THROWS_WITH(resolve_freeze(f, two_states()),
                      Contains("no state 'nosuch'") && Contains("a, b"));
}

TEST_CASE("M-step: tied states get one table from pooled counts", "[train]") {
    const Profile p = parse_profile(R"({
      "format": "tidemark-profile/1", "name": "tied",
      "regions": [{"name": "r", "report": true}],
      "states": [{"name": "x", "region": "r", "order": 0, "tie": "g", "emissions": [[0.1,0.2,0.3,0.4]]},
                 {"name": "y", "region": "r", "order": 0, "tie": "g", "emissions": [[0.1,0.2,0.3,0.4]]}],
      "initial": {"x": 1},
      "transitions": {"x": {"y": 1}, "y": {"x": 1}}})",
                                    "tied");
    TrainingCounts c = TrainingCounts::zero(p);
    c.emissions[0][0] = {1, 2, 3, 4};
    c.emissions[1][0] = {4, 3, 2, 6};
    const Profile q = maximise(p, p, c, none(p), MStepOptions{0.0});
    // pooled (5, 5, 5, 10) / 25
    CHECK(q.states[0].emissions[0][0] == Approx(0.2));
    CHECK(q.states[0].emissions[0][3] == Approx(0.4));
    CHECK(q.states[1].emissions == q.states[0].emissions);
    // One table of 3 free entries; initial and the rows have one non-zero entry each.
    CHECK(free_parameters(p, none(p)) == 3);
    // Freezing one member freezes the group.
    Freeze f;
    parse_freeze("emissions:y", f);
    const Profile r = maximise(p, p, c, resolve_freeze(f, p), MStepOptions{0.0});
    CHECK(r.states[0].emissions == p.states[0].emissions);
}

TEST_CASE("M-step: a min_length row (hand computation)", "[train]") {
    const Profile p = parse_profile(R"({
      "format": "tidemark-profile/1", "name": "chain",
      "regions": [{"name": "isl", "report": true, "min_length": 3}, {"name": "bg", "report": false}],
      "states": [{"name": "i", "region": "isl", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]},
                 {"name": "o", "region": "bg", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]}],
      "initial": {"o": 1},
      "transitions": {"i": {"i": 0.5, "o": 0.5}, "o": {"o": 0.9, "i": 0.1}}})",
                                    "chain");
    TrainingCounts c = TrainingCounts::zero(p);
    c.transitions[0] = {50, 10};
    c.chain_steps[0] = 20;
    const Profile q = maximise(p, p, c, none(p), MStepOptions{0.0});
    // The tail copy stayed 50 - 20 = 30 times and left 10 times: stay = 30/40.
    CHECK(q.transitions[0][0] == Approx(0.75));
    CHECK(q.transitions[0][1] == Approx(0.25));
}

TEST_CASE("M-step: a multi-state min_length row maximises the expected log-likelihood", "[train]") {
    // Region 'r' has states 0 and 1 and min_length 4; state 2 is outside. For counts N_u and M
    // forced steps, the expected complete-data log-likelihood of row 0 is
    //   Q(A) = sum_u N_u ln A_0u - M ln(A_00 + A_01),
    // since forced steps use A_0u / (A_00 + A_01). Compared with 20000 random rows.
    const Profile p = parse_profile(R"({
      "format": "tidemark-profile/1", "name": "chain3",
      "regions": [{"name": "r", "report": true, "min_length": 4}, {"name": "o", "report": false}],
      "states": [{"name": "a", "region": "r", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]},
                 {"name": "b", "region": "r", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]},
                 {"name": "c", "region": "o", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]}],
      "initial": {"c": 1},
      "transitions": {"a": {"a": 0.4, "b": 0.4, "c": 0.2}, "b": {"b": 0.5, "a": 0.3, "c": 0.2},
                      "c": {"c": 0.9, "a": 0.1}}})",
                                    "chain3");
    TrainingCounts c = TrainingCounts::zero(p);
    c.transitions[0] = {37.5, 21.25, 6.0};
    c.chain_steps[0] = 40.0;
    for (double a : {0.0, 1.0}) {
        const Profile q = maximise(p, p, c, none(p), MStepOptions{a});
        const auto Q = [&](const std::vector<double>& A) {
            double v = 0;
            for (int u = 0; u < 3; ++u) v += (c.transitions[0][u] + a) * std::log(A[u]);
            return v - c.chain_steps[0] * std::log(A[0] + A[1]);
        };
        const double best = Q(q.transitions[0]);
        std::mt19937_64 rng(7);
        std::exponential_distribution<double> e(1.0);
        double highest = -1e300;
        for (int i = 0; i < 20000; ++i) {
            std::vector<double> A = {e(rng), e(rng), e(rng)};
            const double s = A[0] + A[1] + A[2];
            for (auto& x : A) x /= s;
            highest = std::max(highest, Q(A));
        }
        INFO("pseudocount " << a);
        CHECK(best >= highest);
        CHECK(q.transitions[0][0] + q.transitions[0][1] + q.transitions[0][2] == Approx(1.0));
    }
}

TEST_CASE("Perturbed restarts keep structural zeros, sums and ties", "[train]") {
    std::mt19937_64 rng(5);
    const Profile p = test::random_profile(rng, 4, 2, {1, 0}, true);
    const FreezeMask mask = resolve_freeze(Freeze{}, p);
    const Profile q = perturb(p, mask, 42, 1, 0.5);
    for (size_t s = 0; s < p.states.size(); ++s) {
        double sum = 0;
        for (size_t u = 0; u < p.states.size(); ++u) {
            CHECK((p.transitions[s][u] == 0) == (q.transitions[s][u] == 0));
            sum += q.transitions[s][u];
        }
        CHECK(sum == Approx(1.0));
        for (size_t r = 0; r < p.states[s].emissions.size(); ++r)
            for (int b = 0; b < 4; ++b)
                CHECK((p.states[s].emissions[r][b] == 0) == (q.states[s].emissions[r][b] == 0));
    }
    CHECK(q.transitions != p.transitions);
    // The result is a valid profile.
    CHECK_NOTHROW(parse_profile(to_json(q), "perturbed"));
}

namespace {

// A window profile of three classes ordered around 'typical' (the gc-shift template's shape).
Profile ordered_window_profile() {
    return parse_profile(R"({
      "format": "tidemark-profile/1", "name": "ordered", "window": {"size": 1000},
      "regions": [{"name": "at_shifted", "report": true}, {"name": "typical", "report": false},
                  {"name": "gc_shifted", "report": true}],
      "states": [
        {"name": "at_shifted", "region": "at_shifted",
         "gc": {"mean": 0.4, "dispersion": 0.01, "below": "typical"}},
        {"name": "typical", "region": "typical", "gc": {"mean": 0.5, "dispersion": 0.01}},
        {"name": "gc_shifted", "region": "gc_shifted",
         "gc": {"mean": 0.6, "dispersion": 0.01, "above": "typical"}}],
      "initial": {"at_shifted": 0.1, "typical": 0.8, "gc_shifted": 0.1},
      "transitions": {"at_shifted": {"at_shifted": 0.9, "typical": 0.1},
                      "typical": {"at_shifted": 0.05, "typical": 0.9, "gc_shifted": 0.05},
                      "gc_shifted": {"gc_shifted": 0.9, "typical": 0.1}}})",
                         "test");
}

// Q of one state written out with std::lgamma (the test's own arithmetic, not tidemark's).
double q_state(const TrainingCounts& c, int s, double mean, double total) {
    const double a = mean * total, b = (1 - mean) * total;
    double q = 0;
    for (const WindowTally& t : c.windows) {
        const double k = static_cast<double>(t.gc), n = static_cast<double>(t.known);
        q += t.weight[s] * (std::lgamma(k + a) + std::lgamma(n - k + b) - std::lgamma(n + a + b) -
                            std::lgamma(a) - std::lgamma(b) + std::lgamma(a + b));
    }
    return q;
}

// max over alpha + beta at a fixed mean, by a log grid refined twice around its best point.
double q_profile(const TrainingCounts& c, int s, double mean) {
    double lo = std::log(1.0), hi = std::log(1e6), best = -1e300, at = lo;
    for (int round = 0; round < 3; ++round) {
        for (int i = 0; i <= 200; ++i) {
            const double u = lo + (hi - lo) * i / 200;
            const double q = q_state(c, s, mean, std::exp(u));
            if (q > best) {
                best = q;
                at = u;
            }
        }
        const double step = (hi - lo) / 200;
        lo = at - 2 * step;
        hi = at + 2 * step;
    }
    return best;
}

}  // namespace

TEST_CASE("M-step: ordered window classes stay on their side of the reference (grid search)",
          "[train]") {
    const Profile p = ordered_window_profile();
    TrainingCounts c = TrainingCounts::zero(p);
    // Windows of 1000 bases, overdispersed (spread beyond the binomial's 16): 'typical' ones
    // around GC 0.50, 'gc_shifted' ones around 0.45 (the wrong side: unconstrained, gc_shifted
    // would fit below typical), 'at_shifted' ones around 0.35 (the right side: its constraint
    // stays inactive).
    const auto add = [&](int state, std::initializer_list<int> gcs) {
        for (int k : gcs) {
            WindowTally t{k, 1000, {0.0, 0.0, 0.0}};
            t.weight[state] = 1;
            c.windows.push_back(t);
        }
    };
    add(1, {440, 470, 490, 500, 505, 510, 520, 530, 560, 480, 495, 515, 500, 545});
    add(2, {420, 445, 460, 490, 465, 430});
    add(0, {300, 350, 380, 345, 325, 390});
    FreezeMask freeze = resolve_freeze(Freeze{}, p);
    const Profile out = maximise(p, p, c, freeze, MStepOptions{0});
    const auto& at = out.states[0].gc;
    const auto& typical = out.states[1].gc;
    const auto& gc = out.states[2].gc;
    CHECK(at.mean < typical.mean);
    CHECK(gc.mean >= typical.mean);

    // Independent: the constrained optimum by exhaustive search. gc_shifted's own optimum is
    // below typical's, so at the optimum the two share one mean m maximising
    // g_typical(m) + g_gc(m) (each maximised over its own dispersion); at_shifted is free.
    double best = -1e300, best_m = 0;
    for (int i = 0; i <= 300; ++i) {  // m from 0.42 to 0.53, then refined
        const double m = 0.42 + 0.11 * i / 300;
        const double q = q_profile(c, 1, m) + q_profile(c, 2, m);
        if (q > best) {
            best = q;
            best_m = m;
        }
    }
    for (int i = -50; i <= 50; ++i) {
        const double m = best_m + 0.0003 * i / 50;
        const double q = q_profile(c, 1, m) + q_profile(c, 2, m);
        if (q > best) {
            best = q;
            best_m = m;
        }
    }
    CHECK(gc.mean == typical.mean);  // the constraint is active
    CHECK(std::abs(typical.mean - best_m) < 2e-5);
    const double q_tidemark = q_state(c, 1, typical.mean, 1 / typical.dispersion - 1) +
                              q_state(c, 2, gc.mean, 1 / gc.dispersion - 1);
    CHECK(q_tidemark >= best - 1e-6);  // no worse than the grid's optimum
    // at_shifted, unconstrained, is at its own maximum: the grid over its mean agrees.
    double at_best = -1e300, at_m = 0;
    for (int i = 0; i <= 400; ++i) {
        const double m = 0.30 + 0.10 * i / 400;
        const double q = q_profile(c, 0, m);
        if (q > at_best) {
            at_best = q;
            at_m = m;
        }
    }
    CHECK(std::abs(at.mean - at_m) < 3e-4);
    CHECK(q_state(c, 0, at.mean, 1 / at.dispersion - 1) >= at_best - 1e-6);
}

TEST_CASE("M-step: an ordered class never lowers Q, from any feasible start", "[train]") {
    const Profile p = ordered_window_profile();
    TrainingCounts c = TrainingCounts::zero(p);
    for (int k : {400, 420, 480, 500, 520, 560, 600, 610}) {
        WindowTally t{k, 1000, {0.2, 0.5, 0.3}};
        c.windows.push_back(t);
    }
    FreezeMask freeze = resolve_freeze(Freeze{}, p);
    const auto q_all = [&](const Profile& x) {
        double q = 0;
        for (int s = 0; s < 3; ++s)
            q += q_state(c, s, x.states[s].gc.mean, 1 / x.states[s].gc.dispersion - 1);
        return q;
    };
    Profile current = p;
    for (int step = 0; step < 5; ++step) {
        const Profile next = maximise(p, current, c, freeze, MStepOptions{0});
        CHECK(q_all(next) >= q_all(current) - 1e-9);
        CHECK(next.states[0].gc.mean <= next.states[1].gc.mean);
        CHECK(next.states[2].gc.mean >= next.states[1].gc.mean);
        current = next;
    }
}

TEST_CASE("Profiles: gc.below / gc.above are validated", "[profile]") {
    const std::string good = to_json(ordered_window_profile());
    CHECK(parse_profile(good, "x").states[0].gc_side == -1);
    CHECK(parse_profile(good, "x").states[2].gc_reference == "typical");
    const auto bad = [&](const std::string& from, const std::string& to) {
        std::string text = good;
        const auto at = text.find(from);
        REQUIRE(at != std::string::npos);
        text.replace(at, from.size(), to);
        return text;
    };
    CHECK_THROWS_WITH(parse_profile(bad("\"below\": \"typical\"", "\"below\": \"nobody\""), "x"),
                      Catch::Contains("names unknown state 'nobody'"));
    CHECK_THROWS_WITH(parse_profile(bad("\"mean\": 0.4", "\"mean\": 0.55"), "x"),
                      Catch::Contains("mean 0.55 is not below the mean 0.5 of 'typical'"));
    CHECK_THROWS_WITH(
        parse_profile(bad("\"below\": \"typical\"", "\"below\": \"gc_shifted\""), "x"),
        Catch::Contains("a reference must be unconstrained"));
}

TEST_CASE("without_state hands the removed class's entries to its reference", "[train]") {
    const Profile p = ordered_window_profile();
    const Profile q = without_state(p, 2);
    REQUIRE(q.states.size() == 2);
    REQUIRE(q.regions.size() == 2);
    CHECK(q.transitions[1][1] == Approx(0.95));  // typical -> typical gets typical -> gc_shifted
    CHECK(q.transitions[1][0] == Approx(0.05));
    CHECK(q.initial[1] == Approx(0.9));
    const Profile only = without_state(q, 0);
    CHECK(only.states.size() == 1);
    CHECK(only.transitions[0][0] == Approx(1.0));
    // One unreported region is a valid profile: a genome with no shifted class calls nothing.
    CHECK_NOTHROW(parse_profile(to_json(only), "x"));
}
