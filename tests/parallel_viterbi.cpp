// Viterbi on sparse models (duration chains), whose recursion reads only the incoming-transition
// lists: the best path against brute force over every state path of the compiled model.
#include <fmt/format.h>

#include <catch2/catch.hpp>
#include <cmath>
#include <random>

#include "test_util.hpp"
#include "tidemark/decode.hpp"

using namespace tidemark;

namespace {

struct Path : DecodeSink {
    std::vector<int> state;
    void block(const BlockView& v) override {
        for (int64_t t = 0; t < v.size; ++t)
            for (int s = 0; s < v.states; ++s)
                if (v.posterior[t * v.states + s] == 1.0) state.push_back(s);
    }
};

// Island segments of at least L bases (a chain of L copies), order-0 emissions.
Profile chain_profile(int L) {
    return parse_profile(fmt::format(R"({{
      "format": "tidemark-profile/1", "name": "chain",
      "regions": [{{"name": "isl", "report": true, "min_length": {}}}, {{"name": "bg", "report": false}}],
      "states": [{{"name": "i", "region": "isl", "order": 0, "emissions": [[0.1,0.4,0.4,0.1]]}},
                 {{"name": "o", "region": "bg", "order": 0, "emissions": [[0.35,0.15,0.1,0.4]]}}],
      "initial": {{"i": 0.3, "o": 0.7}},
      "transitions": {{"i": {{"i": 0.7, "o": 0.3}}, "o": {{"o": 0.75, "i": 0.25}}}}}})",
                                     L),
                         "chain");
}

// log P(sequence, path) from the compiled transitions and the profile's emission rows.
double log_joint(const Profile& p, const Model& m, const std::string& seq,
                 const std::vector<int>& path) {
    const std::string acgt = "ACGT";
    const int S = m.states;
    double lp = std::log(m.initial[path[0]]);
    for (size_t t = 0; t < seq.size(); ++t) {
        if (t > 0) lp += std::log(m.transitions[static_cast<size_t>(path[t - 1]) * S + path[t]]);
        lp += std::log(p.states[m.profile_state[path[t]]].emissions[0][acgt.find(seq[t])]);
    }
    return lp;
}

}  // namespace

TEST_CASE("sparse Viterbi finds the best path of brute-force enumeration", "[parallel]") {
    // Oracle: every one of the S^n paths of the compiled chain model scored directly.
    std::mt19937_64 rng(7101);
    for (int L : {3, 4}) {
        const Profile p = chain_profile(L);
        const Model m = compile(p);
        const int S = m.states;
        REQUIRE(2 * m.in_from.size() < static_cast<size_t>(S * S));  // the sparse recursion is used
        for (int trial = 0; trial < 6; ++trial) {
            std::string seq;
            for (int t = 0; t < 8; ++t) seq += "ACGT"[rng() % 4];
            double best = -INFINITY;
            std::vector<int> path(seq.size(), 0);
            for (;;) {
                bool possible = m.initial[path[0]] > 0;
                for (size_t t = 1; possible && t < seq.size(); ++t)
                    possible = m.transitions[static_cast<size_t>(path[t - 1]) * S + path[t]] > 0;
                if (possible) best = std::max(best, log_joint(p, m, seq, path));
                size_t t = 0;
                while (t < seq.size() && ++path[t] == S) path[t++] = 0;
                if (t == seq.size()) break;
            }
            ViterbiDecoder dec(m);
            Path got;
            const DecodeResult r = dec.run(test::contig_from(seq), got);
            INFO("L " << L << " sequence " << seq);
            REQUIRE(got.state.size() == seq.size());
            CHECK(r.log_likelihood == Approx(best).epsilon(0).margin(1e-12));
            CHECK(log_joint(p, m, seq, got.state) == Approx(best).epsilon(0).margin(1e-12));
        }
    }
}
