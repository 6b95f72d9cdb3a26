// Internals of the decoders (decode.cpp, decode_segments.cpp, viterbi.cpp): exact rescaling,
// the recursion steps, emission-table rows, the state-count dispatch and the one block sweep that
// unsplit and segmented posterior decoding share.
#pragma once

#include <fmt/format.h>

#include <algorithm>
#include <array>
#include <bit>
#include <cmath>
#include <cstring>
#include <type_traits>
#include <vector>

#include "tidemark/decode.hpp"
#include "tidemark/error.hpp"

namespace tidemark::detail {

// Rescaling threshold. Sums are rescaled by an exact power of two once they fall below 2^-64,
// which leaves room for a single step to shrink a vector by 2^-900 without denormals.
constexpr double rescale_below = 0x1p-64;
constexpr double ln2 = 0.69314718055994530942;

inline int64_t choose_block(const Model& m, int64_t requested) {
    if (requested > 0) return requested;
    const int64_t budget = int64_t{32} << 20;
    const int64_t b = budget / (5 * 8 * std::max(1, m.states));
    return std::clamp<int64_t>(b, 256, int64_t{1} << 16);
}

// Exponent e with x = m * 2^e, m in [0.5, 1), as std::frexp gives it; read from the bits for
// normal numbers because the library call showed up in profiles.
inline int exponent_of(double x) {
    const int biased = static_cast<int>((std::bit_cast<uint64_t>(x) >> 52) & 0x7ff);
    if (biased == 0 || biased == 0x7ff) {
        int e = 0;
        std::frexp(x, &e);
        return e;
    }
    return biased - 1022;
}

// Exactly 2^k.
inline double pow2(int k) {
    if (k >= -1022 && k <= 1023)
        return std::bit_cast<double>(static_cast<uint64_t>(k + 1023) << 52);
    return std::ldexp(1.0, k);
}

// Multiplies v by the power of two that brings its sum into [0.5, 1); returns the exponent
// removed. Exact in binary floating point, so it adds no rounding error.
inline int rescale(double* v, int S, double sum) {
    const int e = exponent_of(sum);
    const double f = pow2(-e);
    for (int i = 0; i < S; ++i) v[i] *= f;
    return e;
}

[[noreturn]] inline void impossible(const Model& m, const Contig& c, int64_t pos) {
    throw InputError(fmt::format(
        "contig '{}': the sequence is impossible under profile '{}' at or near position {} "
        "(every state path has probability 0); a state with a zero emission or transition "
        "probability cannot explain it",
        c.name, m.name, c.offset + m.position_start(pos) + 1));
}

inline bool use_sparse(const Model& m) {
    return 2 * m.in_from.size() < static_cast<size_t>(m.states) * static_cast<size_t>(m.states);
}

// out_j = sum_i prev_i A_ij
template <int Fixed>
inline void step_forward(const Model& m, const double* A, bool sparse, const double* prev,
                         double* out) {
    const int S = Fixed > 0 ? Fixed : m.states;
    if (Fixed == 0 && sparse) {
        for (int j = 0; j < S; ++j) {
            double acc = 0;
            for (int e = m.in_begin[j]; e < m.in_begin[j + 1]; ++e)
                acc += prev[m.in_from[e]] * m.in_prob[e];
            out[j] = acc;
        }
        return;
    }
    // Sums here start from their first term instead of 0: the same value for the non-negative
    // numbers of a recursion, and one dependent addition less on its critical path.
    for (int j = 0; j < S; ++j) out[j] = prev[0] * A[j];
    for (int i = 1; i < S; ++i) {
        const double p = prev[i];
        const double* row = A + static_cast<size_t>(i) * S;
        for (int j = 0; j < S; ++j) out[j] += p * row[j];
    }
}

// out_i = sum_j A_ij g_j
template <int Fixed>
inline void step_backward(const Model& m, const double* A, bool sparse, const double* g,
                          double* out) {
    const int S = Fixed > 0 ? Fixed : m.states;
    if (Fixed == 0 && sparse) {
        for (int i = 0; i < S; ++i) {
            double acc = 0;
            for (int e = m.out_begin[i]; e < m.out_begin[i + 1]; ++e)
                acc += m.out_prob[e] * g[m.out_to[e]];
            out[i] = acc;
        }
        return;
    }
    for (int i = 0; i < S; ++i) {
        const double* row = A + static_cast<size_t>(i) * S;
        double acc = row[0] * g[0];
        for (int j = 1; j < S; ++j) acc += row[j] * g[j];
        out[i] = acc;
    }
}

// True when a base of [begin, end) is unknown.
inline bool has_unknown(const Contig& c, int64_t begin, int64_t end) {
    const auto ends_after = [](int64_t pos, const UnknownRun& r) {
        return pos < r.begin + r.length;
    };
    const auto it = std::upper_bound(c.unknown.begin(), c.unknown.end(), begin, ends_after);
    return it != c.unknown.end() && it->begin < end;
}

// Element by element on purpose: std::copy becomes a memmove call, and passing a local vector's
// address to a call keeps the compiler from holding that vector in registers.
inline void copy_vec(const double* from, int S, double* to) {
    for (int i = 0; i < S; ++i) to[i] = from[i];
}

inline double sum_of(const double* v, int S) {
    double s = v[0];
    for (int i = 1; i < S; ++i) s += v[i];
    return s;
}

// p = f * b / (f . b), the posterior row from scaled forward and backward vectors; false when
// f . b is not positive (the sequence is impossible there).
template <int Fixed>
inline bool combine_posterior(const double* f, const double* b, int states, double* p) {
    const int S = Fixed > 0 ? Fixed : states;
    double dot = f[0] * b[0];
    for (int i = 1; i < S; ++i) dot += f[i] * b[i];
    if (!(dot > 0)) return false;
    const double inv = 1.0 / dot;
    for (int i = 0; i < S; ++i) p[i] = f[i] * b[i] * inv;
    return true;
}

// One block's sweeps, interleaved so that the processor overlaps the two recursions: iteration
// i computes forward(i) and backward(n-2-i) (backward(n-1) is the checkpoint). Position t has
// both once i = max(t, n-2-t), so the second half of the iterations also finishes two
// posteriors each, filling the gaps that the two recursions leave.
template <class Forward, class Backward, class Posterior>
[[gnu::always_inline]] inline void interleaved_block(int64_t n, Forward& forward_at,
                                                     Backward& backward_at,
                                                     Posterior& posterior_at) {
    int64_t i = 0;
    for (; i < n && 2 * i < n - 2; ++i) {
        forward_at(i);
        backward_at(n - 2 - i);
    }
    for (; i < n; ++i) {
        forward_at(i);
        const int64_t u = n - 2 - i;
        if (u >= 0) backward_at(u);
        posterior_at(i);
        if (u >= 0 && u != i) posterior_at(u);
    }
}

// Row layout of the decoder's emission table (PosteriorDecoder::fast_emission_), S doubles per
// row. The first rows are build_fast_emission_table's (full contexts, row ctx*4 + base); after
// them one row of ones for unknown bases, then for each v < max_order the rows of positions
// with only v known bases before them (row partial(v) + ctx*4 + base). Every position of a
// contig is then one table row, found without branching on the state.
struct TableLayout {
    uint32_t unknown = 0;
    std::array<uint32_t, max_emission_order> partial{};
    uint32_t rows = 0;
    explicit TableLayout(int max_order) {
        uint32_t r = 4u << (2 * max_order);
        unknown = r++;
        for (int v = 0; v < max_order; ++v) {
            partial[v] = r;
            r += 4u << (2 * v);
        }
        rows = r;
    }
};

// Table rows (TableLayout) and base codes of positions [start, start+n): one table row per
// position from the rolling context. Inlined so that each sweep keeps its own tight copy.
[[gnu::always_inline]] inline void fill_rows_of(const Model& m, const Contig& contig,
                                                const TableLayout& layout, int64_t start, int64_t n,
                                                uint8_t* bases, uint32_t* rows) {
    const int K = m.max_order;
    const uint32_t mask = (1u << (2 * K)) - 1;
    RollingContext ctx = context_before(contig, start, K);
    contig.unpack(start, n, bases);
    if (ctx.complete(K) && !has_unknown(contig, start, start + n)) {
        const uint32_t window = (4u << (2 * K)) - 1;
        uint32_t row = ctx.code;
        for (int64_t t = 0; t < n; ++t) rows[t] = row = ((row << 2) | bases[t]) & window;
        return;
    }
    for (int64_t t = 0; t < n; ++t) {
        const uint8_t b = bases[t];
        if (b != base_unknown && ctx.complete(K)) {
            rows[t] = (ctx.code << 2) | b;
            ctx.code = rows[t] & mask;
        } else {
            rows[t] =
                b == base_unknown ? layout.unknown : layout.partial[ctx.valid] + ctx.code * 4 + b;
            ctx.push(b);
        }
    }
}

// Models with up to this many states get a decoder compiled for their size (PosteriorDecoder::run).
constexpr int max_fixed_states = 6;

// Calls f(std::integral_constant<int, S>) for the model's state count (1..max_fixed_states).
template <typename F>
decltype(auto) with_fixed_states(int states, F&& f) {
    switch (states) {
        case 1:
            return f(std::integral_constant<int, 1>{});
        case 2:
            return f(std::integral_constant<int, 2>{});
        case 3:
            return f(std::integral_constant<int, 3>{});
        case 4:
            return f(std::integral_constant<int, 4>{});
        case 5:
            return f(std::integral_constant<int, 5>{});
        case 6:
            return f(std::integral_constant<int, 6>{});
        default:
            throw InternalError("decoder: segments need a model of at most 6 states");
    }
}

// The S-vectors of the recursions: a fixed-size array the compiler keeps in registers for the
// common small models, a heap vector otherwise.
template <int Fixed>
struct Vec {
    explicit Vec(int) {}
    std::array<double, Fixed> v{};
    double* data() { return v.data(); }
};
template <>
struct Vec<0> {
    explicit Vec(int S) : v(S) {}
    std::vector<double> v;
    double* data() { return v.data(); }
};

// ---------------------------------------------------------------------------------------------
// The block sweep

// The forward sweep over one block [start, start + n) with the block's backward vectors rebuilt
// from its checkpoint (bw row n-1 on entry): the two recursions interleaved (interleaved_block),
// posteriors into post. fp holds the forward vector before the block on entry (unused at
// position 0) and the block's last on exit; exponent and last_sum follow the forward
// recursion's rescaling. Fixed > 0 steps with the folded matrices of each position's table row
// (rows); Fixed = 0 with A (dense or sparse) and the emission rows em. Unsplit (run_fixed) and
// segmented (sweep_segments) decoding both run this, so they compute the same numbers. The
// recursion vectors, the exponent and the last sum are locals (not the caller's) so that the
// compiler can keep them in registers: it cannot know that they do not alias the block buffers.
// Out of line: inlined into the segment sweep (decode_segments.cpp) it made the whole scan of
// chrX 7-10 % slower than the segment sweep's own copy before the two were unified (user time,
// alternating runs against a build of 802f571); one call per block costs nothing measurable.
template <int Fixed>
[[gnu::noinline]] void sweep_block(const Model& m, const Contig& contig, const double* A,
                                   bool sparse, const double* folded, int64_t start, int64_t n,
                                   const uint32_t* rows, const double* em, double* fw, double* bw,
                                   double* post, double* forward_before, int64_t& exponent_io,
                                   double& last_sum_io) {
    const int S = Fixed > 0 ? Fixed : m.states;
    int64_t exponent = exponent_io;
    double last_sum = last_sum_io;
    Vec<Fixed> fpv(S), xv(S), bnv(S), ggv(S);
    double* fp = fpv.data();
    double* x = xv.data();
    double* bn = bnv.data();
    double* gg = ggv.data();
    copy_vec(forward_before, S, fp);
    copy_vec(bw + (n - 1) * S, S, bn);
    const auto forward_at = [&](int64_t t) {
        const int64_t pos = start + t;
        if (pos == 0) {
            const double* e = em + t * S;
            for (int i = 0; i < S; ++i) x[i] = m.initial[i] * e[i];
        } else if constexpr (Fixed > 0) {
            const double* F = folded + static_cast<size_t>(rows[t]) * S * S;
            for (int j = 0; j < S; ++j) x[j] = fp[0] * F[j];
            for (int i = 1; i < S; ++i)
                for (int j = 0; j < S; ++j) x[j] += fp[i] * F[i * S + j];
        } else {
            step_forward<Fixed>(m, A, sparse, fp, x);
            const double* e = em + t * S;
            for (int i = 0; i < S; ++i) x[i] *= e[i];
        }
        double s = sum_of(x, S);
        if (!(s > 0)) impossible(m, contig, pos);
        if (s < rescale_below) {
            exponent += rescale(x, S, s);
            s = sum_of(x, S);
        }
        last_sum = s;
        double* f = fw + t * S;
        for (int i = 0; i < S; ++i) f[i] = fp[i] = x[i];
    };
    const auto backward_at = [&](int64_t u) {  // from bn = backward at u + 1
        if constexpr (Fixed > 0) {
            const double* F = folded + static_cast<size_t>(rows[u + 1]) * S * S;
            for (int i = 0; i < S; ++i) {
                double acc = F[i * S] * bn[0];
                for (int j = 1; j < S; ++j) acc += F[i * S + j] * bn[j];
                gg[i] = acc;
            }
            copy_vec(gg, S, bn);
        } else {
            const double* e = em + (u + 1) * S;
            for (int i = 0; i < S; ++i) gg[i] = e[i] * bn[i];
            step_backward<Fixed>(m, A, sparse, gg, bn);
        }
        const double s = sum_of(bn, S);
        if (s < rescale_below) rescale(bn, S, s);
        copy_vec(bn, S, bw + u * S);
    };
    const auto posterior_at = [&](int64_t t) {
        if (!combine_posterior<Fixed>(fw + t * S, bw + t * S, S, post + t * S))
            impossible(m, contig, start + t);
    };
    interleaved_block(n, forward_at, backward_at, posterior_at);
    copy_vec(fp, S, forward_before);
    exponent_io = exponent;
    last_sum_io = last_sum;
}

// Posterior decoding of a window model (decode_windows.cpp), with the forward and backward
// vectors kept as logs. One window's emissions can differ between states by thousands of nats (a
// 20-kb window's G+C count under two narrow beta-binomials), so a path that a min_length chain
// holds on to can fall more than 2^-1074 behind another and come back: scaled probabilities would
// drop it (a wrong posterior, or an "impossible" contig). Same blocks and checkpoints as the
// per-base sweeps; the sinks get probabilities.
DecodeResult decode_windows(const Model& m, int64_t block, const Contig& contig, DecodeSink& sink);

}  // namespace tidemark::detail

namespace tidemark {

// Buffers of one block for a segment's sweeps, one per pool worker (decode_segments.cpp).
struct PosteriorDecoder::Workspace {
    std::vector<uint8_t> bases;
    std::vector<uint32_t> rows;
    std::vector<double> emission, forward, backward, posterior;
    void size(int64_t B, int S) {
        const size_t BS = static_cast<size_t>(B) * S;
        bases.resize(B);
        rows.resize(B);
        emission.resize(BS);
        forward.resize(BS);
        backward.resize(BS);
        posterior.resize(BS);
    }
};

}  // namespace tidemark
