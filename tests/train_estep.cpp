// E-step counts against exhaustive enumeration of every state path (independent of the
// decoder): initial, transition, chain-step and emission expectations and the log-likelihood.
#include <catch2/catch.hpp>
#include <cmath>

#include "test_util.hpp"
#include "tidemark/train.hpp"
#include "train_enumerate.hpp"

using namespace tidemark;

namespace {

using test::enumerate;

void require_close(double got, double want, const std::string& what) {
    INFO(what << ": got " << got << ", enumeration " << want);
    REQUIRE(std::abs(got - want) <= 1e-9 * std::max(1.0, std::abs(want)));
}

void compare(const TrainingCounts& got, const TrainingCounts& want) {
    const size_t P = want.initial.size();
    for (size_t s = 0; s < P; ++s) {
        require_close(got.initial[s], want.initial[s], "initial " + std::to_string(s));
        require_close(got.chain_steps[s], want.chain_steps[s], "chain steps " + std::to_string(s));
        for (size_t u = 0; u < P; ++u)
            require_close(got.transitions[s][u], want.transitions[s][u],
                          "transition " + std::to_string(s) + "->" + std::to_string(u));
        for (size_t r = 0; r < want.emissions[s].size(); ++r)
            for (int b = 0; b < 4; ++b)
                require_close(got.emissions[s][r][b], want.emissions[s][r][b],
                              "emission state " + std::to_string(s) + " row " + std::to_string(r));
    }
    require_close(got.log_likelihood, want.log_likelihood, "log-likelihood");
}

TrainingCounts sum_of(const Profile& p, const std::vector<std::string>& seqs) {
    TrainingCounts total = TrainingCounts::zero(p);
    for (const auto& s : seqs) total.add(enumerate(p, s));
    return total;
}

}  // namespace

TEST_CASE("E-step counts equal exhaustive enumeration over all state paths", "[train]") {
    std::mt19937_64 rng(20240611);
    const std::vector<std::string> seqs = {"ACGNTTAGC", "GGCATN", "T", "CANNGTACG"};
    struct Case {
        int S, R;
        std::vector<int> orders;
        bool zeros;
    };
    for (const Case& k : {Case{2, 2, {0}, false}, Case{3, 2, {1, 0, 2}, false},
                          Case{3, 3, {1}, true}, Case{4, 2, {2, 1}, false}}) {
        const Profile p = test::random_profile(rng, k.S, k.R, k.orders, k.zeros);
        const TrainingCounts want = sum_of(p, seqs);
        for (int64_t block : {int64_t{0}, int64_t{1}, int64_t{4}}) {
            std::vector<Contig> contigs;
            for (size_t i = 0; i < seqs.size(); ++i)
                contigs.push_back(test::contig_from(seqs[i], "c" + std::to_string(i)));
            MemoryTrainingData data(std::move(contigs));
            const TrainingCounts got = expected_counts(p, data, block);
            INFO("states " << k.S << ", block " << block);
            compare(got, want);
            CHECK(got.contigs == 4);
            CHECK(got.known == 21);  // bases other than N: 8 + 5 + 1 + 7, counted by hand
            CHECK(got.positions == 25);
        }
    }
}

TEST_CASE("E-step on a min_length chain equals enumeration with the segment rule", "[train]") {
    // Region 'isl' (one order-1 state) needs segments of >= 3 bases; region 'bg' has two states
    // and min_length 2, so its chain renormalises over both.
    const std::string json = R"({
      "format": "tidemark-profile/1", "name": "chain",
      "regions": [{"name": "isl", "report": true, "min_length": 3},
                  {"name": "bg", "report": false, "min_length": 2}],
      "states": [
        {"name": "i", "region": "isl", "order": 1,
         "emissions": [[0.1,0.4,0.4,0.1],[0.2,0.3,0.3,0.2],[0.25,0.25,0.25,0.25],[0.1,0.2,0.6,0.1]]},
        {"name": "b1", "region": "bg", "order": 0, "emissions": [[0.3,0.2,0.2,0.3]]},
        {"name": "b2", "region": "bg", "order": 0, "emissions": [[0.4,0.1,0.1,0.4]]}],
      "initial": {"i": 0.3, "b1": 0.5, "b2": 0.2},
      "transitions": {"i": {"i": 0.7, "b1": 0.2, "b2": 0.1},
                      "b1": {"b1": 0.5, "b2": 0.2, "i": 0.3},
                      "b2": {"b2": 0.4, "b1": 0.35, "i": 0.25}}})";
    const Profile p = parse_profile(json, "chain test");
    const std::vector<std::string> seqs = {"ACGCGTTAGC", "GCNGCAT"};
    const TrainingCounts want = sum_of(p, seqs);
    for (int64_t block : {int64_t{0}, int64_t{3}}) {
        std::vector<Contig> contigs;
        for (const auto& s : seqs) contigs.push_back(test::contig_from(s));
        MemoryTrainingData data(std::move(contigs));
        INFO("block " << block);
        compare(expected_counts(p, data, block), want);
    }
}

TEST_CASE("E-step with more states than the fixed-size kernels (dense generic path)", "[train]") {
    // Seven fully connected states: neither a fixed-size kernel (S <= 6) nor the sparse lists.
    std::mt19937_64 rng(77);
    const Profile p = test::random_profile(rng, 7, 3, {1, 0});
    const std::vector<std::string> seqs = {"ACGNTA", "GGC"};
    const TrainingCounts want = sum_of(p, seqs);
    for (int64_t block : {int64_t{0}, int64_t{2}}) {
        std::vector<Contig> contigs;
        for (const auto& s : seqs) contigs.push_back(test::contig_from(s));
        MemoryTrainingData data(std::move(contigs));
        INFO("block " << block);
        compare(expected_counts(p, data, block), want);
    }
}
