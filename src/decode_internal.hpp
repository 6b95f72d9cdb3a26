// Internals of the decoders (decode.cpp, decode_segments.cpp, viterbi.cpp): exact rescaling,
// the recursion steps, emission-table rows, the state-count dispatch and the one block sweep that
// unsplit and segmented posterior decoding share.
#pragma once

#include <fmt/format.h>

#include <algorithm>
#include <array>
#include <bit>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <string_view>
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

// out_j = sum_i prev_i A_ij (the generic path; fixed-size models step in lanes)
inline void step_forward(const Model& m, const double* A, bool sparse, const double* prev,
                         double* out) {
    const int S = m.states;
    if (sparse) {
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

// out_i = sum_j A_ij g_j (the generic path)
inline void step_backward(const Model& m, const double* A, bool sparse, const double* g,
                          double* out) {
    const int S = m.states;
    if (sparse) {
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
inline bool combine_posterior(const double* f, const double* b, int S, double* p) {
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
// Lane vectors of the fixed-size recursions

// An S-vector held as one GCC/Clang vector of S rounded up to a power of two lanes (spare lanes
// hold 0). Vector operations are element-wise IEEE arithmetic, so each lane computes exactly
// what a scalar loop computes for its index, in the same order: results are bit for bit those
// of scalar code, whatever instructions the compiler picks (SSE2 pairs, AVX, NEON). Scalar code
// left the compiler one double per instruction and spilled the 4 x 4 matrix sweep to the stack.
using Lanes1 = double __attribute__((vector_size(1 * sizeof(double))));
using Lanes2 = double __attribute__((vector_size(2 * sizeof(double))));
using Lanes4 = double __attribute__((vector_size(4 * sizeof(double))));
using Lanes8 = double __attribute__((vector_size(8 * sizeof(double))));
template <int S>
using Lanes = std::conditional_t<
    S == 1, Lanes1, std::conditional_t<S == 2, Lanes2, std::conditional_t<S <= 4, Lanes4, Lanes8>>>;

// The same operations on S separate doubles: where an S-vector would not fit one register
// (S = 5, 6; and S = 3, 4 without AVX) the vector types spilled to the stack and decoded up to
// 2.5 times slower than plain loops, so these sizes keep the loops (same operations, same order,
// same bits).
template <int S>
struct ScalarLanes {
    double v[S];
    double& operator[](int i) { return v[i]; }
    double operator[](int i) const { return v[i]; }
    ScalarLanes& operator+=(const ScalarLanes& o) {
        for (int i = 0; i < S; ++i) v[i] += o.v[i];
        return *this;
    }
    ScalarLanes& operator*=(const ScalarLanes& o) {
        for (int i = 0; i < S; ++i) v[i] *= o.v[i];
        return *this;
    }
    ScalarLanes& operator*=(double f) {
        for (int i = 0; i < S; ++i) v[i] *= f;
        return *this;
    }
    friend ScalarLanes operator*(double a, const ScalarLanes& x) {
        ScalarLanes r;
        for (int i = 0; i < S; ++i) r.v[i] = a * x.v[i];
        return r;
    }
    friend ScalarLanes operator*(const ScalarLanes& x, double a) {
        ScalarLanes r;
        for (int i = 0; i < S; ++i) r.v[i] = x.v[i] * a;
        return r;
    }
};

// The kernels' S-vector: lanes where they fit registers (Avx2: the kernel is the AVX2 build).
template <int S, bool Avx2>
using KernelVector = std::conditional_t<S <= 2 || (Avx2 && S <= 4), Lanes<S>, ScalarLanes<S>>;

// The fixed-size kernels are compiled twice on x86-64: for the baseline instruction set (SSE2,
// whose 16 registers hold a 4 x 4 matrix sweep only with spills to the stack) and for AVX2 (one
// register per row of 4), chosen at run time. Each kernel is an always-inline body with two
// out-of-line callers, one with the AVX2 target attribute; everything the body inlines is
// compiled for its caller. No FMA: the AVX2 code does the same multiplications and additions,
// so both give the same bits (whole scan of chrX 1-70 Mb, one thread: 2.3 s portable,
// 1.5 s AVX2).
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#define TIDEMARK_AVX2_KERNELS 1
// TIDEMARK_KERNELS=portable in the environment keeps the baseline build (tests and benchmarks
// compare the two).
inline bool use_avx2_kernels() {
    static const bool yes = [] {
        const char* choice = std::getenv("TIDEMARK_KERNELS");
        return __builtin_cpu_supports("avx2") &&
               !(choice && std::string_view(choice) == "portable");
    }();
    return yes;
}
#else
#define TIDEMARK_AVX2_KERNELS 0
inline bool use_avx2_kernels() {
    return false;
}
#endif

// Vectors go by reference, never by value: a by-value vector's calling convention depends on
// the instruction set, and these helpers must mean the same in every translation unit.
// S below the lane count (3, 5, 6) is built element by element: a copy of S doubles into the
// vector went through the stack, and the wider load after the narrower stores stalled (the
// 3-state decoding took 2.4 times as long as with scalar code).
template <int S>
[[gnu::always_inline]] inline void load_lanes(const double* p, ScalarLanes<S>& v) {
    for (int i = 0; i < S; ++i) v[i] = p[i];
}

template <int S>
[[gnu::always_inline]] inline void store_lanes(const ScalarLanes<S>& v, double* p) {
    for (int i = 0; i < S; ++i) p[i] = v[i];
}

template <int S>
[[gnu::always_inline]] inline void load_lanes(const double* p, Lanes<S>& v) {
    if constexpr (S == 3) {
        v = Lanes<S>{p[0], p[1], p[2], 0.0};
    } else if constexpr (S == 5) {
        v = Lanes<S>{p[0], p[1], p[2], p[3], p[4], 0.0, 0.0, 0.0};
    } else if constexpr (S == 6) {
        v = Lanes<S>{p[0], p[1], p[2], p[3], p[4], p[5], 0.0, 0.0};
    } else {
        static_assert(sizeof(Lanes<S>) == S * sizeof(double), "lanes of S without padding");
        std::memcpy(&v, p, sizeof v);
    }
}

template <int S>
[[gnu::always_inline]] inline void store_lanes(const Lanes<S>& v, double* p) {
    if constexpr (sizeof(Lanes<S>) == S * sizeof(double)) {
        std::memcpy(p, &v, sizeof v);
    } else {
        for (int i = 0; i < S; ++i) p[i] = v[i];
    }
}

// The sum of the S lanes in index order (sum_of's order).
template <int S, class V>
[[gnu::always_inline]] inline double lane_sum(const V& v) {
    double s = v[0];
    for (int i = 1; i < S; ++i) s += v[i];
    return s;
}

// x = f F (the forward step on a folded matrix): lane j is sum_i f_i F_ij, summed in i order.
template <int S, class V>
[[gnu::always_inline]] inline void forward_lanes(const double* F, const V& f, V& x) {
    V row;
    load_lanes<S>(F, row);
    x = f[0] * row;
    for (int i = 1; i < S; ++i) {
        load_lanes<S>(F + i * S, row);
        x += f[i] * row;
    }
}

// x = F b (the backward step), from the transposed matrix C (C_ji = F_ij): lane i is
// sum_j F_ij b_j, summed in j order.
template <int S, class V>
[[gnu::always_inline]] inline void backward_lanes(const double* C, const V& b, V& x) {
    V column;
    load_lanes<S>(C, column);
    x = column * b[0];
    for (int j = 1; j < S; ++j) {
        load_lanes<S>(C + j * S, column);
        x += column * b[j];
    }
}

// True when some lane is at least `bound`, as far as a cheap test tells; false means "form the
// ordered sum". A sum of non-negative numbers, rounded in any order, is at least its largest
// term, so then the ordered sum (lane_sum) is too: for vectors this settles most steps'
// rescaling check without the ordered sum's chain of dependent additions. Plain loops always
// form the sum, as the scalar code did: comparing every entry made them 9-17 % slower (portable
// build, chrX, 3 to 6 states).
template <int S, class V>
[[gnu::always_inline]] inline bool surely_at_least(const V& v, double bound) {
    if constexpr (std::is_same_v<V, ScalarLanes<S>>) {
        (void)v;
        (void)bound;
        return false;
    } else {
        const auto at_least = v >= bound;  // lanes of -1 (true) or 0
        auto any = at_least[0];
        for (int i = 1; i < S; ++i) any |= at_least[i];
        return any != 0;
    }
}

// rescale() for lanes.
template <int S, class V>
[[gnu::always_inline]] inline int rescale_lanes(V& v, double sum) {
    const int e = exponent_of(sum);
    v *= pow2(-e);
    return e;
}

// ---------------------------------------------------------------------------------------------
// The block sweep

// The forward sweep over one block [start, start + n) with the block's backward vectors rebuilt
// from its checkpoint (bw row n-1 on entry): the two recursions interleaved (interleaved_block),
// posteriors into post. fp holds the forward vector before the block on entry (unused at
// position 0) and the block's last on exit; exponent and last_sum follow the forward
// recursion's rescaling. Fixed > 0 steps in lanes with the folded matrices of each position's
// table row (rows; their transposes, columns, for the backward steps); Fixed = 0 with A (dense
// or sparse) and the emission rows em. Unsplit (run_fixed) and segmented (sweep_segments)
// decoding both run this, so they compute the same numbers. The recursion vectors and the
// exponent are locals (not the caller's) so that the compiler can keep them in registers: it
// cannot know that they do not alias the block buffers.
// Out of line (sweep_block_portable, sweep_block_avx2): inlined into the segment sweep
// (decode_segments.cpp) it made the whole scan of chrX 7-10 % slower than the segment sweep's
// own copy before the two were unified; one call per block costs nothing measurable.
struct BlockSweep {
    const Model& m;
    const Contig& contig;
    const double* A;        ///< transitions (generic path)
    bool sparse;            ///< A as incoming/outgoing lists (generic path)
    const double* folded;   ///< folded matrices per table row (fixed-size path)
    const double* columns;  ///< their transposes (fixed-size path)
    int64_t start, n;
    const uint32_t* rows;
    const double* em;
    double *fw, *bw, *post;
    double* forward_before;
    int64_t& exponent_io;
    double& last_sum_io;
};

template <int Fixed, bool Avx2>
[[gnu::always_inline]] inline void sweep_block_body(const BlockSweep& a) {
    const Model& m = a.m;
    const Contig& contig = a.contig;
    const int64_t start = a.start, n = a.n;
    const uint32_t* rows = a.rows;
    const double* em = a.em;
    double *fw = a.fw, *bw = a.bw, *post = a.post;
    int64_t exponent = a.exponent_io;
    if constexpr (Fixed > 0) {
        constexpr int S = Fixed;
        constexpr size_t SS = static_cast<size_t>(S) * S;
        using V = KernelVector<S, Avx2>;
        const double* folded = a.folded;
        const double* columns = a.columns;
        V fp, bn;
        load_lanes<S>(a.forward_before, fp);
        load_lanes<S>(bw + (n - 1) * S, bn);
        const auto forward_at = [&](int64_t t) __attribute__((always_inline)) {
            const int64_t pos = start + t;
            V x;
            if (pos == 0) {
                V e;
                load_lanes<S>(m.initial.data(), x);
                load_lanes<S>(em + t * S, e);
                x *= e;
            } else {
                forward_lanes<S>(folded + rows[t] * SS, fp, x);
            }
            if (!surely_at_least<S>(x, rescale_below)) {
                const double s = lane_sum<S>(x);
                if (!(s > 0)) impossible(m, contig, pos);
                if (s < rescale_below) exponent += rescale_lanes<S>(x, s);
            }
            store_lanes<S>(x, fw + t * S);
            fp = x;
        };
        const auto backward_at = [&](int64_t u) __attribute__((always_inline)) {
            V x;  // from bn = backward at u + 1
            backward_lanes<S>(columns + rows[u + 1] * SS, bn, x);
            bn = x;
            if (!surely_at_least<S>(bn, rescale_below)) {
                const double s = lane_sum<S>(bn);
                if (s < rescale_below) rescale_lanes<S>(bn, s);
            }
            store_lanes<S>(bn, bw + u * S);
        };
        const auto posterior_at = [&](int64_t t) __attribute__((always_inline)) {
            V both, b;
            load_lanes<S>(fw + t * S, both);
            load_lanes<S>(bw + t * S, b);
            both *= b;
            const double dot = lane_sum<S>(both);
            if (!(dot > 0)) impossible(m, contig, start + t);
            store_lanes<S>(both * (1.0 / dot), post + t * S);
        };
        interleaved_block(n, forward_at, backward_at, posterior_at);
        store_lanes<S>(fp, a.forward_before);
        a.last_sum_io = lane_sum<S>(fp);  // the last step's sum, after any rescaling
    } else {
        const int S = m.states;
        const double* A = a.A;
        const bool sparse = a.sparse;
        double last_sum = a.last_sum_io;
        Vec<0> fpv(S), xv(S), bnv(S), ggv(S);
        double* fp = fpv.data();
        double* x = xv.data();
        double* bn = bnv.data();
        double* gg = ggv.data();
        copy_vec(a.forward_before, S, fp);
        copy_vec(bw + (n - 1) * S, S, bn);
        const auto forward_at = [&](int64_t t) {
            const int64_t pos = start + t;
            const double* e = em + t * S;
            if (pos == 0) {
                for (int i = 0; i < S; ++i) x[i] = m.initial[i] * e[i];
            } else {
                step_forward(m, A, sparse, fp, x);
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
            const double* e = em + (u + 1) * S;
            for (int i = 0; i < S; ++i) gg[i] = e[i] * bn[i];
            step_backward(m, A, sparse, gg, bn);
            const double s = sum_of(bn, S);
            if (s < rescale_below) rescale(bn, S, s);
            copy_vec(bn, S, bw + u * S);
        };
        const auto posterior_at = [&](int64_t t) {
            if (!combine_posterior(fw + t * S, bw + t * S, S, post + t * S))
                impossible(m, contig, start + t);
        };
        interleaved_block(n, forward_at, backward_at, posterior_at);
        copy_vec(fp, S, a.forward_before);
        a.last_sum_io = last_sum;
    }
    a.exponent_io = exponent;
}

template <int Fixed>
[[gnu::noinline]] void sweep_block_portable(const BlockSweep& a) {
    sweep_block_body<Fixed, false>(a);
}
#if TIDEMARK_AVX2_KERNELS
template <int Fixed>
[[gnu::noinline, gnu::target("avx2")]] void sweep_block_avx2(const BlockSweep& a) {
    sweep_block_body<Fixed, true>(a);
}
#endif

template <int Fixed>
void sweep_block(const BlockSweep& a) {
#if TIDEMARK_AVX2_KERNELS
    if (Fixed > 0 && use_avx2_kernels()) return sweep_block_avx2<Fixed>(a);
#endif
    sweep_block_portable<Fixed>(a);
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
