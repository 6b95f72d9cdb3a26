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
