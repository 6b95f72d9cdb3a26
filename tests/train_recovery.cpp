// Baum-Welch recovers known parameters from sequences simulated (with the test's own seeded
// generator) from a three-region order-1 profile, starting from a perturbed profile.
#include <catch2/catch.hpp>

#include "tidemark/train.hpp"
#include "train_sim.hpp"

using namespace tidemark;

TEST_CASE("Baum-Welch recovers emissions and switch probabilities of a simulated profile",
          "[train][slow]") {
    // Truth: GC 0.3 / 0.5 / 0.7 classes with context-dependent order-1 rows; unequal switches.
    Profile truth = test::gc_classes({0.3, 0.5, 0.7}, 1e-3, 1);
    truth.transitions = {
        {1 - 1.0e-3, 0.7e-3, 0.3e-3}, {0.3e-3, 1 - 0.6e-3, 0.3e-3}, {0.6e-3, 0.9e-3, 1 - 1.5e-3}};
    std::vector<Contig> contigs;
    contigs.push_back(test::simulate(truth, 1500000, 11, nullptr, "a"));
    contigs.push_back(test::simulate(truth, 1500000, 12, nullptr, "b"));
    MemoryTrainingData data(std::move(contigs));

    // Start: GC 0.36 / 0.46 / 0.62, all rows of a class equal, switches 3e-3 split equally.
    const Profile start = test::gc_classes({0.36, 0.46, 0.62}, 3e-3, 0);
    Profile start1 = truth;  // the truth's structure (order 1) with the start's numbers
    for (size_t s = 0; s < 3; ++s) {
        for (auto& row : start1.states[s].emissions) row = start.states[s].emissions[0];
        start1.transitions[s] = start.transitions[s];
    }
    FitOptions o;
    o.max_iter = 300;
    o.tol = 1e-9;
    const FitResult fit = baum_welch(start1, data, o, Logger(LogLevel::quiet));
    INFO("iterations " << fit.iterations);
    CHECK(fit.converged);
    for (size_t s = 0; s < 3; ++s) {
        for (size_t r = 0; r < 4; ++r)
            for (int b = 0; b < 4; ++b) {
                INFO("state " << s << " row " << r << " base " << b);
                CHECK(std::abs(fit.profile.states[s].emissions[r][b] -
                               truth.states[s].emissions[r][b]) <= 0.02);
            }
        for (size_t u = 0; u < 3; ++u) {
            if (u == s) continue;
            INFO("switch " << s << "->" << u << ": " << fit.profile.transitions[s][u] << " vs "
                           << truth.transitions[s][u]);
            CHECK(std::abs(fit.profile.transitions[s][u] / truth.transitions[s][u] - 1) <= 0.2);
        }
    }
}
