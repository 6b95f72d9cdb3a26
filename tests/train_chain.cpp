// min_length chains: posteriors summed over a chain equal enumeration with the segment rule,
// rows sum to 1, Viterbi never makes a segment shorter than L, and the compiled size is linear.
#include <fmt/format.h>

#include <catch2/catch.hpp>

#include "test_util.hpp"
#include "tidemark/decode.hpp"
#include "tidemark/train.hpp"
#include "train_enumerate.hpp"
#include "train_sim.hpp"

using namespace tidemark;

namespace {

struct Rows : DecodeSink {
    std::vector<double> posterior;
    int states = 0;
    void block(const BlockView& v) override {
        states = v.states;
        posterior.insert(posterior.end(), v.posterior, v.posterior + v.size * v.states);
    }
};

// Island: GC-rich, segments of >= L bases; background AT-rich. Switches are likely, so without
// the chain short island segments would be common.
Profile island_profile(int L) {
    return parse_profile(fmt::format(R"({{
      "format": "tidemark-profile/1", "name": "chain",
      "regions": [{{"name": "isl", "report": true, "min_length": {}}}, {{"name": "bg", "report": false}}],
      "states": [{{"name": "i", "region": "isl", "order": 0, "emissions": [[0.1,0.4,0.4,0.1]]}},
                 {{"name": "o", "region": "bg", "order": 0, "emissions": [[0.4,0.1,0.1,0.4]]}}],
      "initial": {{"i": 0.5, "o": 0.5}},
      "transitions": {{"i": {{"i": 0.8, "o": 0.2}}, "o": {{"o": 0.8, "i": 0.2}}}}}})",
                                     L),
                         "chain");
}

// Lengths of the runs of one region along a 0/1 indicator path, with the last run flagged.
std::vector<std::pair<int64_t, bool>> region_runs(const Model& m, const Rows& rows, int region) {
    std::vector<std::pair<int64_t, bool>> runs;
    const int S = rows.states;
    const size_t n = rows.posterior.size() / S;
    int64_t run = 0;
    for (size_t t = 0; t < n; ++t) {
        int state = 0;
        for (int s = 0; s < S; ++s)
            if (rows.posterior[t * S + s] == 1.0) state = s;
        if (m.region_of_state[state] == region) {
            ++run;
        } else if (run > 0) {
            runs.emplace_back(run, false);
            run = 0;
        }
    }
    if (run > 0) runs.emplace_back(run, true);
    return runs;
}

}  // namespace

TEST_CASE("Chain posteriors summed per region equal enumeration with the segment rule", "[train]") {
    for (int L : {1, 3, 5}) {
        const Profile p = island_profile(L);
        const Model m = compile(p);
        REQUIRE(m.states == L + 1);
        for (const std::string seq : {"ATGCGCGATA", "GCGNATGCCA", "CCCCATAT"}) {
            std::vector<double> want;
            const TrainingCounts e = test::enumerate(p, seq, &want);
            for (int64_t block : {int64_t{0}, int64_t{3}}) {
                PosteriorDecoder dec(m, DecoderOptions{block});
                Rows rows;
                const DecodeResult r = dec.run(test::contig_from(seq), rows);
                INFO("L " << L << ", " << seq << ", block " << block);
                CHECK(r.log_likelihood == Approx(e.log_likelihood).epsilon(1e-10));
                for (size_t t = 0; t < seq.size(); ++t) {
                    double sum = 0, isl = 0;
                    for (int s = 0; s < m.states; ++s) {
                        sum += rows.posterior[t * m.states + s];
                        if (m.region_of_state[s] == 0) isl += rows.posterior[t * m.states + s];
                    }
                    CHECK(sum == Approx(1.0).epsilon(1e-12));
                    CHECK(isl == Approx(want[t * 2 + 0]).epsilon(1e-9).margin(1e-12));
                }
            }
        }
    }
}

TEST_CASE("Viterbi never makes a min_length segment shorter than L", "[train]") {
    // 20 kb from the unconstrained model (mean segment 5 bases) are full of short segments.
    const Profile free = island_profile(1);
    const Contig seq = test::simulate(free, 20000, 99);
    const int L = 12;
    {
        const Model m = compile(free);
        ViterbiDecoder dec(m);
        Rows rows;
        dec.run(seq, rows);
        int64_t shortest = 1 << 30;
        for (auto [len, last] : region_runs(m, rows, 0))
            if (!last) shortest = std::min(shortest, len);
        REQUIRE(shortest < L);  // the constraint below is not trivially met
    }
    const Profile p = island_profile(L);
    const Model m = compile(p);
    for (int64_t block : {int64_t{0}, int64_t{777}}) {
        ViterbiDecoder dec(m, DecoderOptions{block});
        Rows rows;
        dec.run(seq, rows);
        const auto runs = region_runs(m, rows, 0);
        REQUIRE(runs.size() > 10);
        for (auto [len, last] : runs)
            if (!last) CHECK(len >= L);
    }
}

TEST_CASE("A chain grows the compiled model linearly", "[train]") {
    // One-state region with min_length L: copies 1..L-1 have one forced step each; copy L keeps
    // its self-loop and exit; the other state has its self-loop and its entry to copy 1. By hand:
    // (L - 1) + 2 + 2 non-zero transitions in L + 1 states.
    for (int L : {2, 10, 100, 1000}) {
        const Model m = compile(island_profile(L));
        CHECK(m.states == L + 1);
        CHECK(m.out_to.size() == static_cast<size_t>(L - 1 + 4));
        CHECK(m.state_names[0] == fmt::format("i[1/{}]", L));
        CHECK(m.initial[0] == 0.5);
        CHECK(m.initial[1] == (L == 1 ? 0.5 : 0.0));
    }
}
