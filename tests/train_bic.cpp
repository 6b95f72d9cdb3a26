// BIC picks the true number of classes on simulated data with clearly separated classes, and the
// parameter counts behind it equal hand counts.
#include <catch2/catch.hpp>

#include "tidemark/train.hpp"
#include "train_sim.hpp"

using namespace tidemark;

TEST_CASE("BIC chooses the simulated number of classes", "[train][slow]") {
    // Three order-0 classes at GC 0.25 / 0.5 / 0.75, mean segment 5 kb, 1 Mbp.
    const Profile truth = test::gc_classes({0.25, 0.5, 0.75}, 2e-4, 0);
    std::vector<Contig> contigs;
    contigs.push_back(test::simulate(truth, 1000000, 3));
    MemoryTrainingData data(std::move(contigs));
    FitOptions o;
    o.max_iter = 60;
    SeedOptions seed;
    seed.window = 1000;
    const Selection sel = select_classes(data, 1, 5, 0, seed, o, Logger(LogLevel::quiet));
    REQUIRE(sel.candidates.size() == 5);
    INFO(selection_table(sel));
    CHECK(sel.candidates[sel.chosen].classes == 3);
    // Free parameters of K order-0 classes, by hand: 3K emissions + K(K-1) switches + (K-1)
    // initial = 3, 9, 17, 27, 39.
    const std::vector<int64_t> hand = {3, 9, 17, 27, 39};
    for (size_t i = 0; i < 5; ++i) CHECK(sel.candidates[i].parameters == hand[i]);
    // Log-likelihood grows with the classes up to the truth (nested fits from data seeds).
    CHECK(sel.candidates[1].log_likelihood > sel.candidates[0].log_likelihood);
    CHECK(sel.candidates[2].log_likelihood > sel.candidates[1].log_likelihood);
}
