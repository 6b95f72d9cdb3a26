// Internal: the simulator's random generator (xoshiro256**) and integer-only categorical sampling.
#pragma once

#include <cstdint>
#include <vector>

namespace tidemark::detail {

/// SplitMix64, used only to expand a 64-bit seed into xoshiro's 256-bit state, as xoshiro's
/// authors recommend (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number
/// generators", OOPSLA; citation from memory). Constants as published there.
inline uint64_t splitmix64(uint64_t& state) {
    uint64_t z = (state += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}

/// xoshiro256** 1.0 (Blackman & Vigna 2021, "Scrambled linear pseudorandom number generators",
/// ACM Trans. Math. Softw. 47:36; citation from memory; constants 5, 7, 9, 17, 45 as
/// published, checked against test vectors in tests/simulate.cpp). Written out here rather than
/// taken from <random> so that a seed gives the same stream with every compiler and standard
/// library.
class Xoshiro256ss {
public:
    explicit Xoshiro256ss(uint64_t seed) {
        uint64_t sm = seed;
        for (auto& word : s_) word = splitmix64(sm);
    }
    /// Direct state, for checking against published test vectors.
    Xoshiro256ss(uint64_t s0, uint64_t s1, uint64_t s2, uint64_t s3) : s_{s0, s1, s2, s3} {}

    uint64_t next() {
        const uint64_t result = rotl(s_[1] * 5, 7) * 9;
        const uint64_t t = s_[1] << 17;
        s_[2] ^= s_[0];
        s_[3] ^= s_[1];
        s_[1] ^= s_[2];
        s_[0] ^= s_[3];
        s_[2] ^= t;
        s_[3] = rotl(s_[3], 45);
        return result;
    }
    /// 53 uniformly distributed bits (the high bits, which are the best ones of any generator
    /// of this family), as an integer in [0, 2^53).
    uint64_t next53() { return next() >> 11; }

private:
    static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
    uint64_t s_[4];
};

inline constexpr uint64_t unit53 = uint64_t{1} << 53;

/// Cumulative thresholds of a categorical distribution on the 2^53 grid: outcome i is drawn when
/// the first threshold above a uniform 53-bit integer r is thresholds[i]. Probabilities are
/// normalised by their sum; the last outcome with positive probability ends at exactly 2^53, so
/// rounding can never fall off the end, and outcomes of probability 0 are never drawn.
/// Only additions, one division and a multiplication by a power of two are done in floating
/// point (all correctly rounded in IEEE 754), so the thresholds are the same on every machine.
inline void categorical_thresholds(const double* p, int n, uint64_t* thresholds) {
    double total = 0;
    int last = -1;
    for (int i = 0; i < n; ++i) {
        total += p[i];
        if (p[i] > 0) last = i;
    }
    double cum = 0;
    for (int i = 0; i < n; ++i) {
        cum += p[i];
        const double scaled = (cum / total) * static_cast<double>(unit53);
        uint64_t t = scaled >= static_cast<double>(unit53) ? unit53 : static_cast<uint64_t>(scaled);
        if (i >= last) t = unit53;
        if (i > 0 && t < thresholds[i - 1]) t = thresholds[i - 1];  // keep them monotone
        if (p[i] <= 0) t = i > 0 ? thresholds[i - 1] : 0;
        thresholds[i] = t;
    }
}

/// Index of the outcome for the uniform draw r in [0, 2^53).
inline int sample_categorical(const uint64_t* thresholds, int n, uint64_t r) {
    int i = 0;
    while (i < n - 1 && r >= thresholds[i]) ++i;
    return i;
}

}  // namespace tidemark::detail
