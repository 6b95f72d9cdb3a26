// Test-only sequence simulator for the training tests: a seeded xoshiro256** generator and a
// sampler that follows the profile format's definition directly (not the compiled Model).
#pragma once

#include <array>
#include <cstdint>
#include <stdexcept>
#include <vector>

#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark::test {

/// xoshiro256** seeded by splitmix64 (Blackman & Vigna, "Scrambled linear pseudorandom number
/// generators", ACM TOMS 2021), written here for the tests.
class TestRandom {
public:
    explicit TestRandom(uint64_t seed) {
        for (auto& x : s_) {
            seed += 0x9e3779b97f4a7c15ULL;
            uint64_t z = seed;
            z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
            z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
            x = z ^ (z >> 31);
        }
    }
    uint64_t next() {
        const uint64_t r = rotl(s_[1] * 5, 7) * 9, t = s_[1] << 17;
        s_[2] ^= s_[0];
        s_[3] ^= s_[1];
        s_[1] ^= s_[2];
        s_[0] ^= s_[3];
        s_[2] ^= t;
        s_[3] = rotl(s_[3], 45);
        return r;
    }
    double uniform() { return static_cast<double>(next() >> 11) * 0x1.0p-53; }
    /// Index drawn from probabilities p[0..n).
    template <class V>
    int draw(const V& p, int n) {
        double u = uniform(), acc = 0;
        for (int i = 0; i < n; ++i) {
            acc += p[i];
            if (u < acc) return i;
        }
        for (int i = n - 1; i >= 0; --i)
            if (p[i] > 0) return i;
        return n - 1;
    }

private:
    static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
    uint64_t s_[4];
};

/// n bases sampled from a profile without min_length chains: state path from initial and
/// transitions; base t from the state's row of the k preceding bases, or from the mean of its
/// rows when fewer than k bases precede (the format's rule). path receives the states.
inline Contig simulate(const Profile& p, int64_t n, uint64_t seed, std::vector<int>* path = nullptr,
                       const std::string& name = "sim") {
    for (const auto& r : p.regions)
        if (r.min_length > 1) throw std::logic_error("simulate: chains not supported");
    TestRandom rng(seed);
    Contig c;
    c.name = name;
    const int S = static_cast<int>(p.states.size());
    int s = rng.draw(p.initial, S);
    std::vector<uint8_t> recent;
    for (int64_t t = 0; t < n; ++t) {
        if (t > 0) s = rng.draw(p.transitions[s], S);
        if (path) path->push_back(s);
        const StateSpec& st = p.states[s];
        std::array<double, 4> row{};
        if (t >= st.order) {
            size_t ctx = 0;
            for (int j = st.order; j >= 1; --j) ctx = ctx * 4 + recent[recent.size() - j];
            row = st.emissions[ctx];
        } else {
            for (const auto& r : st.emissions)
                for (int b = 0; b < 4; ++b)
                    row[b] += r[b] / static_cast<double>(st.emissions.size());
        }
        const uint8_t b = static_cast<uint8_t>(rng.draw(row, 4));
        c.push(b);
        recent.push_back(b);
        if (recent.size() > 8) recent.erase(recent.begin());
    }
    return c;
}

/// A profile of order-0 or order-1 states, one region each (region 0 reported), given the GC
/// of each state and the probability of leaving it (split equally among the others).
inline Profile gc_classes(const std::vector<double>& gc, double leave, int order) {
    Profile p;
    p.name = "sim";
    const int K = static_cast<int>(gc.size());
    for (int k = 0; k < K; ++k) {
        p.regions.push_back({"r" + std::to_string(k), k == 0, ""});
        StateSpec s;
        s.name = "s" + std::to_string(k);
        s.region = k;
        s.order = order;
        const double g = gc[k];
        for (int row = 0; row < (order ? 4 : 1); ++row) {
            // Rows differ a little by context (an asymmetry after A and T) so that order 1 is
            // meaningful; every row keeps the class's GC.
            const double skew = order ? 0.04 * (row % 2 ? 1 : -1) : 0.0;
            s.emissions.push_back(
                {(1 - g) / 2 + skew, g / 2 - skew, g / 2 + skew, (1 - g) / 2 - skew});
        }
        p.states.push_back(s);
    }
    p.initial.assign(K, 1.0 / K);
    p.transitions.assign(K, std::vector<double>(K, K > 1 ? leave / (K - 1) : 0.0));
    for (int k = 0; k < K; ++k) p.transitions[k][k] = K > 1 ? 1 - leave : 1.0;
    return p;
}

}  // namespace tidemark::test
