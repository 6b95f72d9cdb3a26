// Posterior decoding by checkpointed scaled forward-backward, and bounded-memory Viterbi.
#include "tidemark/decode.hpp"

#include <fmt/format.h>
#include <zlib.h>

#include <algorithm>
#include <array>
#include <bit>
#include <cmath>
#include <cstring>
#include <deque>
#include <functional>
#include <future>
#include <limits>

#include "thread_pool.hpp"
#include "tidemark/error.hpp"
#include "tidemark/window.hpp"

namespace tidemark {
namespace {

// Rescaling threshold. Sums are rescaled by an exact power of two once they fall below 2^-64,
// which leaves room for a single step to shrink a vector by 2^-900 without denormals.
constexpr double rescale_below = 0x1p-64;
constexpr double ln2 = 0.69314718055994530942;

int64_t choose_block(const Model& m, int64_t requested) {
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

[[noreturn]] void impossible(const Model& m, const Contig& c, int64_t pos) {
    throw InputError(fmt::format(
        "contig '{}': the sequence is impossible under profile '{}' at or near position {} "
        "(every state path has probability 0); a state with a zero emission or transition "
        "probability cannot explain it",
        c.name, m.name, c.offset + m.position_start(pos) + 1));
}

bool use_sparse(const Model& m) {
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
            for (int e = m.in_begin[j]; e < m.in_begin[j + 1]; ++e) acc += prev[m.in_from[e]] * m.in_prob[e];
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
            for (int e = m.out_begin[i]; e < m.out_begin[i + 1]; ++e) acc += m.out_prob[e] * g[m.out_to[e]];
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
bool has_unknown(const Contig& c, int64_t begin, int64_t end) {
    const auto ends_after = [](int64_t pos, const UnknownRun& r) { return pos < r.begin + r.length; };
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
inline void interleaved_block(int64_t n, Forward& forward_at, Backward& backward_at, Posterior& posterior_at) {
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

}  // namespace

void SinkFanout::begin_contig(const Contig& c) {
    for (auto* s : sinks_) s->begin_contig(c);
}
void SinkFanout::block(const BlockView& v) {
    for (auto* s : sinks_) s->block(v);
}
void SinkFanout::end_contig(const Contig& c, const DecodeResult& r) {
    for (auto* s : sinks_) s->end_contig(c, r);
}
std::unique_ptr<DecodeSink> SinkFanout::fork() const {
    std::vector<std::unique_ptr<DecodeSink>> forks;
    std::vector<DecodeSink*> raw;
    for (auto* s : sinks_) {
        forks.push_back(s->fork());
        if (!forks.back()) return nullptr;
        raw.push_back(forks.back().get());
    }
    auto out = std::make_unique<SinkFanout>(std::move(raw));
    out->owned_ = std::move(forks);
    return out;
}
void SinkFanout::join(DecodeSink& later) {
    auto* other = dynamic_cast<SinkFanout*>(&later);
    if (!other || other->sinks_.size() != sinks_.size()) throw InternalError("SinkFanout::join: not a fork of this fanout");
    for (size_t i = 0; i < sinks_.size(); ++i) sinks_[i]->join(*other->sinks_[i]);
}

std::vector<double> build_fast_emission_table(const Model& m) {
    if (m.window > 0) return {};  // window emissions depend on the window's counts, not a context
    const size_t contexts = size_t{1} << (2 * m.max_order);
    const size_t entries = contexts * 4 * static_cast<size_t>(m.states);
    if (entries * sizeof(double) > (size_t{32} << 20)) return {};
    std::vector<double> table(entries);
    for (size_t c = 0; c < contexts; ++c)
        for (uint8_t b = 0; b < 4; ++b)
            for (int s = 0; s < m.states; ++s)
                table[(c * 4 + b) * m.states + s] =
                    m.emission_prob(s, static_cast<uint32_t>(c), m.max_order, b);
    return table;
}

double fill_emissions(const Model& m, const Contig& contig, int64_t begin, int64_t n,
                      uint8_t* bases, double* emission, const std::vector<double>* fast_table) {
    if (m.window > 0) return fill_window_emissions(m, contig, begin, n, bases, emission);
    const int S = m.states;
    const int K = m.max_order;
    const uint32_t mask = (1u << (2 * K)) - 1;
    uint32_t ctx = 0;
    int64_t valid = 0;
    const auto roll = [&](uint8_t b) {
        if (b == base_unknown) {
            ctx = 0;
            valid = 0;
        } else {
            ctx = ((ctx << 2) | b) & mask;
            ++valid;
        }
    };
    const int64_t look = std::min<int64_t>(K, begin);
    uint8_t before[max_emission_order];
    contig.unpack(begin - look, look, before);
    for (int64_t k = 0; k < look; ++k) roll(before[k]);
    contig.unpack(begin, n, bases);
    const double* fast = (fast_table && !fast_table->empty()) ? fast_table->data() : nullptr;
    for (int64_t t = 0; t < n; ++t) {
        const uint8_t b = bases[t];
        double* row = emission + t * S;
        if (b == base_unknown) {
            for (int s = 0; s < S; ++s) row[s] = 1.0;  // marginalised: sums to 1 over bases
        } else if (fast && valid >= K) {
            std::memcpy(row, fast + (static_cast<size_t>(ctx) * 4 + b) * S, sizeof(double) * S);
        } else {
            for (int s = 0; s < S; ++s) row[s] = m.emission_prob(s, ctx, valid, b);
        }
        roll(b);
    }
    return 0;
}

namespace {

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

std::vector<double> build_decoder_table(const Model& m) {
    std::vector<double> table = build_fast_emission_table(m);
    if (table.empty()) return table;
    const TableLayout layout(m.max_order);
    const size_t S = static_cast<size_t>(m.states);
    if (layout.rows * S * sizeof(double) > (size_t{40} << 20)) return {};
    table.resize(layout.rows * S, 1.0);  // the unknown row stays all ones
    for (int v = 0; v < m.max_order; ++v)
        for (uint32_t c = 0; c < (1u << (2 * v)); ++c)
            for (uint8_t b = 0; b < 4; ++b)
                for (size_t s = 0; s < S; ++s)
                    table[(layout.partial[v] + c * 4 + b) * S + s] =
                        m.emission_prob(static_cast<int>(s), c, v, b);
    return table;
}

// Table rows (TableLayout) and base codes of positions [start, start+n): one table row per
// position from the rolling context. Inlined so that each sweep keeps its own tight copy.
[[gnu::always_inline]] inline void fill_rows_of(const Model& m, const Contig& contig, const TableLayout& layout,
                                                int64_t start, int64_t n, uint8_t* bases, uint32_t* rows) {
    const int K = m.max_order;
    const uint32_t mask = (1u << (2 * K)) - 1;
    uint32_t ctx = 0;
    int valid = 0;
    const auto roll = [&](uint8_t b) {
        if (b == base_unknown) {
            ctx = 0;
            valid = 0;
        } else {
            ctx = ((ctx << 2) | b) & mask;
            valid += valid < K;
        }
    };
    const int64_t look = std::min<int64_t>(K, start);
    uint8_t before[max_emission_order];
    contig.unpack(start - look, look, before);
    for (int64_t k = 0; k < look; ++k) roll(before[k]);
    contig.unpack(start, n, bases);
    if (valid == K && !has_unknown(contig, start, start + n)) {
        const uint32_t window = (4u << (2 * K)) - 1;
        uint32_t row = ctx;
        for (int64_t t = 0; t < n; ++t) rows[t] = row = ((row << 2) | bases[t]) & window;
        return;
    }
    for (int64_t t = 0; t < n; ++t) {
        const uint8_t b = bases[t];
        if (b != base_unknown && valid >= K) {
            rows[t] = (ctx << 2) | b;
            ctx = rows[t] & mask;
        } else {
            rows[t] = b == base_unknown ? layout.unknown : layout.partial[valid] + ctx * 4 + b;
            roll(b);
        }
    }
}

// Models with up to this many states get a decoder compiled for their size (PosteriorDecoder::run).
constexpr int max_fixed_states = 6;

// For every emission row r, the matrix F_r[i][j] = A[i][j] * e_r[j]. One recursion step is
// then a single matrix-vector product, f(t) = f(t-1) F_r(t) and b(t) = F_r(t+1) b(t+1), one
// multiplication shorter on the chain of dependent operations that bounds the speed for
// small models. Rounding differs from (f A) * e by about one unit in the last place per step,
// which the rescaled recursions do not accumulate.
std::vector<double> fold_transitions(const Model& m, const std::vector<double>& table) {
    const size_t S = static_cast<size_t>(m.states);
    if (table.empty()) return {};
    const size_t rows = table.size() / S;
    std::vector<double> folded(rows * S * S);
    for (size_t r = 0; r < rows; ++r)
        for (size_t i = 0; i < S; ++i)
            for (size_t j = 0; j < S; ++j)
                folded[(r * S + i) * S + j] = m.transitions[i * S + j] * table[r * S + j];
    return folded;
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

}  // namespace

// Segments hold whole blocks except at their ends; 16 blocks make the matrix checkpoints and
// the per-segment scheduling negligible next to the work.
constexpr int64_t blocks_per_segment = 16;

namespace {
int64_t choose_segment(const Model& m, int64_t block, const DecoderOptions& o) {
    if (o.segment_size < 0 || m.states > max_fixed_states) return 0;
    const int64_t multiple = std::max<int64_t>(1, o.segment_multiple);
    // At least 64 Ki positions: tiny --block values must not make millions of segments (each
    // has its own sink forks).
    const int64_t want = o.segment_size > 0 ? o.segment_size
                                            : std::max<int64_t>(blocks_per_segment * block, int64_t{1} << 16);
    return (want + multiple - 1) / multiple * multiple;
}

}  // namespace

PosteriorDecoder::PosteriorDecoder(const Model& model, DecoderOptions options)
    : model_(model), block_(choose_block(model, options.block_size)),
      segment_(choose_segment(model, block_, options)),
      fast_emission_(build_decoder_table(model)),
      folded_(model.states <= max_fixed_states ? fold_transitions(model, fast_emission_)
                                               : std::vector<double>{}) {
    if (fast_emission_.empty() || folded_.empty()) segment_ = 0;
}

namespace {

// log(sum_e exp(x_e)) over the values x_e that value(e) gives for e in [begin, end); -inf when
// there are none or all are -inf.
template <class Value>
double log_sum(int begin, int end, Value value) {
    double top = -std::numeric_limits<double>::infinity();
    for (int e = begin; e < end; ++e) top = std::max(top, value(e));
    if (top == -std::numeric_limits<double>::infinity()) return top;
    double sum = 0;
    for (int e = begin; e < end; ++e) sum += std::exp(value(e) - top);
    return top + std::log(sum);
}

// Posterior decoding of a window model, with the forward and backward vectors kept as logs.
// One window's emissions can differ between states by thousands of nats (a 20-kb window's G+C
// count under two narrow beta-binomials), so a path that a min_length chain holds on to can fall
// more than 2^-1074 behind another and come back: scaled probabilities would drop it (a wrong
// posterior, or an "impossible" contig). Same blocks and checkpoints as run_fixed: sweep 1 keeps
// the backward vector at the last window of every block, sweep 2 rebuilds each block's backward
// vectors from it while the forward recursion runs. Every vector is shifted to a log-sum of 0
// after each step; the forward shifts add up to the log-likelihood. The sinks get probabilities:
// posteriors, and the forward, backward and emission rows each divided by a constant of its own.
DecodeResult decode_windows(const Model& m, int64_t block, const Contig& contig, DecodeSink& sink) {
    const int S = m.states;
    const int64_t N = m.positions(contig.length);
    DecodeResult result;
    sink.begin_contig(contig);
    if (N == 0) {
        sink.end_contig(contig, result);
        return result;
    }
    constexpr double neg_inf = -std::numeric_limits<double>::infinity();
    std::vector<double> log_in(m.in_prob.size()), log_out(m.out_prob.size());
    for (size_t e = 0; e < log_in.size(); ++e) log_in[e] = std::log(m.in_prob[e]);
    for (size_t e = 0; e < log_out.size(); ++e) log_out[e] = std::log(m.out_prob[e]);
    const int64_t B = std::min(block, N);
    const int64_t blocks = (N + B - 1) / B;
    const size_t BS = static_cast<size_t>(B) * S;
    std::vector<uint8_t> known(B);
    std::vector<double> le(BS), lb(BS), lf(BS), post(BS), fw(BS), bw(BS), em(BS);
    std::vector<double> checkpoints(static_cast<size_t>(blocks) * S), next(S), prev(S), before(S);
    // Normalises v to a log-sum of 0; returns the shift.
    const auto shift = [S](double* v) {
        const double c = log_sum(0, S, [v](int i) { return v[i]; });
        for (int i = 0; i < S; ++i) v[i] -= c;
        return c;
    };
    // out[i] = log sum_j A_ij exp(g[j]), g = emission + backward of the following window.
    const auto step_back = [&](const double* g, double* out) {
        for (int i = 0; i < S; ++i)
            out[i] = log_sum(m.out_begin[i], m.out_begin[i + 1],
                             [&](int e) { return log_out[e] + g[m.out_to[e]]; });
    };
    // Rows of probabilities for the sinks, each divided by its largest entry.
    const auto to_rows = [S](const double* logs, double* out, int64_t n) {
        for (int64_t t = 0; t < n; ++t) {
            const double* l = logs + t * S;
            const double top = *std::max_element(l, l + S);
            for (int s = 0; s < S; ++s) out[t * S + s] = std::exp(l[s] - top);
        }
    };

    // Sweep 1: backward from the end; next = emission + backward of the window after the one
    // being computed.
    for (int64_t k = blocks - 1; k >= 0; --k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        fill_window_log_emissions(m, contig, start, n, known.data(), le.data());
        double* b = lb.data();  // one row of scratch
        for (int64_t t = n - 1; t >= 0; --t) {
            const int64_t pos = start + t;
            if (pos == N - 1) {
                std::fill(b, b + S, 0.0);
            } else {
                step_back(next.data(), b);
                if (shift(b) == neg_inf) impossible(m, contig, pos + 1);
            }
            if (t == n - 1) std::copy(b, b + S, checkpoints.begin() + k * S);
            for (int s = 0; s < S; ++s) next[s] = le[t * S + s] + b[s];
        }
    }

    // Sweep 2: forward block by block, with the block's backward rows rebuilt from its checkpoint.
    double log_likelihood = 0;
    for (int64_t k = 0; k < blocks; ++k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        fill_window_log_emissions(m, contig, start, n, known.data(), le.data());
        std::copy(checkpoints.begin() + k * S, checkpoints.begin() + (k + 1) * S,
                  lb.begin() + (n - 1) * S);
        for (int64_t t = n - 2; t >= 0; --t) {
            for (int s = 0; s < S; ++s) next[s] = le[(t + 1) * S + s] + lb[(t + 1) * S + s];
            step_back(next.data(), lb.data() + t * S);
            shift(lb.data() + t * S);
        }
        if (k > 0) std::copy(prev.begin(), prev.end(), before.begin());
        for (int64_t t = 0; t < n; ++t) {
            const int64_t pos = start + t;
            double* f = lf.data() + t * S;
            const double* e = le.data() + t * S;
            for (int j = 0; j < S; ++j) {
                const double into =
                    pos == 0 ? (m.initial[j] > 0 ? std::log(m.initial[j]) : neg_inf)
                             : log_sum(m.in_begin[j], m.in_begin[j + 1],
                                       [&](int x) { return prev[m.in_from[x]] + log_in[x]; });
                f[j] = into + e[j];
            }
            const double c = shift(f);
            if (c == neg_inf) impossible(m, contig, pos);
            log_likelihood += c;
            std::copy(f, f + S, prev.begin());
            double* p = post.data() + t * S;
            for (int s = 0; s < S; ++s) p[s] = f[s] + lb[t * S + s];
            if (shift(p) == neg_inf) impossible(m, contig, pos);
            for (int s = 0; s < S; ++s) p[s] = std::exp(p[s]);
        }
        to_rows(lf.data(), fw.data(), n);
        to_rows(lb.data(), bw.data(), n);
        to_rows(le.data(), em.data(), n);
        for (double& x : before) x = std::exp(x);
        BlockView view;
        view.begin = start;
        view.size = n;
        view.states = S;
        view.bases = known.data();
        view.posterior = post.data();
        view.forward = fw.data();
        view.backward = bw.data();
        view.emission = em.data();
        view.forward_before = k == 0 ? nullptr : before.data();
        view.window = m.window;
        sink.block(view);
    }
    result.log_likelihood = log_likelihood;
    sink.end_contig(contig, result);
    return result;
}

}  // namespace

DecodeResult PosteriorDecoder::run(const Contig& contig, DecodeSink& sink, TaskPool* pool) {
    // Window models: few positions (one per window), emissions kept as logs (decode_windows).
    if (model_.window > 0) return decode_windows(model_, block_, contig, sink);
    if (splits(contig.length) && sink.fork()) {
        switch (model_.states) {
            case 1: return run_segmented<1>(contig, sink, pool);
            case 2: return run_segmented<2>(contig, sink, pool);
            case 3: return run_segmented<3>(contig, sink, pool);
            case 4: return run_segmented<4>(contig, sink, pool);
            case 5: return run_segmented<5>(contig, sink, pool);
            case 6: return run_segmented<6>(contig, sink, pool);
            default: break;
        }
    }
    switch (model_.states) {
        case 1: return run_fixed<1>(contig, sink);
        case 2: return run_fixed<2>(contig, sink);
        case 3: return run_fixed<3>(contig, sink);
        case 4: return run_fixed<4>(contig, sink);
        case 5: return run_fixed<5>(contig, sink);
        case 6: return run_fixed<6>(contig, sink);
        default: return run_fixed<0>(contig, sink);  // beyond max_fixed_states
    }
}

template <int Fixed>
DecodeResult PosteriorDecoder::run_fixed(const Contig& contig, DecodeSink& sink) {
    const Model& m = model_;
    const int S = Fixed > 0 ? Fixed : m.states;
    const bool sparse = use_sparse(m);
    const int64_t N = m.positions(contig.length);
    DecodeResult result;
    sink.begin_contig(contig);
    if (N == 0) {
        sink.end_contig(contig, result);
        return result;
    }
    // A contig shorter than a block is one block either way; sizing the buffers to it keeps
    // short runs from allocating (and faulting in) megabytes they never use.
    const int64_t B = std::min(block_, N);
    const int64_t blocks = (N + B - 1) / B;
    const size_t BS = static_cast<size_t>(B) * S;
    bases_.resize(B);
    rows_.resize(B);
    emission_.resize(BS);
    forward_.resize(BS);
    backward_.resize(BS);
    posterior_.resize(BS);
    checkpoints_.resize(static_cast<size_t>(blocks) * S);
    before_.resize(S);
    Vec<Fixed> g(S), cur(S), fprev(S), fx(S), bnext(S);
    // A local copy of the transitions: the compiler can then keep them in registers, knowing
    // that stores to the block buffers cannot change them.
    std::array<double, Fixed * Fixed> fixed_a{};
    if constexpr (Fixed > 0)
        for (int i = 0; i < Fixed * Fixed; ++i) fixed_a[i] = m.transitions[i];
    const double* A = Fixed > 0 ? fixed_a.data() : m.transitions.data();

    // Fixed-size models run on the folded matrices (folded_) and need each position's emission
    // row (rows_); the generic path multiplies by emission_ after each transition step.
    const double* table = fast_emission_.empty() ? nullptr : fast_emission_.data();
    const double* folded = folded_.empty() ? nullptr : folded_.data();
    if (Fixed > 0 && (!table || !folded))
        throw InternalError("decoder: emission table missing for a small model");
    const TableLayout layout(m.max_order);

    // Rows of block [start, start+n) into rows_, bases into bases_ (a shared function).
    const auto fill_rows = [this, &m, &contig, &layout](int64_t start, int64_t n) {
        fill_rows_of(m, contig, layout, start, n, bases_.data(), rows_.data());
    };
    // Emissions of the block (for the generic recursions and for the sinks); returns the natural
    // log of the factors divided out of window emissions (0 for per-base models).
    const auto fill_block = [&](int64_t start, int64_t n) -> double {
        if (!table) return fill_emissions(m, contig, start, n, bases_.data(), emission_.data());
        fill_rows(start, n);
        double* out = emission_.data();
        for (int64_t t = 0; t < n; ++t, out += S) {
            const double* src = table + static_cast<size_t>(rows_[t]) * S;
            for (int s = 0; s < S; ++s) out[s] = src[s];
        }
        return 0.0;
    };
    // out = F_row v (backward step), and out = v F_row (forward step); sums in index order.
    const auto folded_back = [&](uint32_t row, const double* v, double* out) {
        const double* F = folded + static_cast<size_t>(row) * S * S;
        for (int i = 0; i < S; ++i) {
            double acc = F[i * S] * v[0];
            for (int j = 1; j < S; ++j) acc += F[i * S + j] * v[j];
            out[i] = acc;
        }
    };
    const auto folded_fore = [&](uint32_t row, const double* v, double* out) {
        const double* F = folded + static_cast<size_t>(row) * S * S;
        for (int j = 0; j < S; ++j) out[j] = v[0] * F[j];
        for (int i = 1; i < S; ++i)
            for (int j = 0; j < S; ++j) out[j] += v[i] * F[i * S + j];
    };

    // Sweep 1, backward over the whole contig: keep the scaled backward vector at the last
    // position of every block. cur carries b(t+1) across positions and blocks (the generic
    // path carries g = e(t+1) * b(t+1) instead).
    for (int64_t k = blocks - 1; k >= 0; --k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        double* c = cur.data();
        double* gg = g.data();
        if constexpr (Fixed > 0) {
            const uint32_t next_row = rows_[0];  // row of position start + n, from block k + 1
            fill_rows(start, n);
            if (start + n == N) {
                for (int i = 0; i < S; ++i) c[i] = 1.0;
            } else {
                folded_back(next_row, c, gg);
                const double s = sum_of(gg, S);
                if (!(s > 0)) impossible(m, contig, start + n);
                if (s < rescale_below) rescale(gg, S, s);
                copy_vec(gg, S, c);
            }
            copy_vec(c, S, checkpoints_.data() + k * S);
            for (int64_t t = n - 2; t >= 0; --t) {
                folded_back(rows_[t + 1], c, gg);
                const double s = sum_of(gg, S);
                if (!(s > 0)) impossible(m, contig, start + t + 1);
                if (s < rescale_below) rescale(gg, S, s);
                copy_vec(gg, S, c);
            }
        } else {
            fill_block(start, n);
            const double* em = emission_.data();
            for (int64_t t = n - 1; t >= 0; --t) {
                const int64_t pos = start + t;
                if (pos == N - 1) {
                    for (int i = 0; i < S; ++i) c[i] = 1.0;
                } else {
                    step_backward<Fixed>(m, A, sparse, gg, c);
                    const double s = sum_of(c, S);
                    if (!(s > 0)) impossible(m, contig, pos + 1);
                    if (s < rescale_below) rescale(c, S, s);
                }
                if (t == n - 1) copy_vec(c, S, checkpoints_.data() + k * S);
                const double* e = em + t * S;
                for (int i = 0; i < S; ++i) gg[i] = e[i] * c[i];
            }
        }
    }

    // Sweep 2, forward block by block. Inside a block the backward vectors are rebuilt from the
    // block's checkpoint while the forward recursion runs: the two chains are independent, and
    // interleaving them lets the processor overlap their latencies.
    int64_t exponent = 0;
    double last_sum = 0;
    double emission_scale = 0;  // natural log, window models only
    for (int64_t k = 0; k < blocks; ++k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        emission_scale += fill_block(start, n);
        double* bw = backward_.data();
        double* fw = forward_.data();
        const double* em = emission_.data();
        const uint32_t* rows = rows_.data();
        copy_vec(checkpoints_.data() + k * S, S, bw + (n - 1) * S);
        double* fp = fprev.data();
        double* x = fx.data();
        double* bn = bnext.data();
        double* gg = g.data();
        if (k > 0) copy_vec(before_.data(), S, fp);
        copy_vec(bw + (n - 1) * S, S, bn);
        const auto forward_at = [&](int64_t t) {
            const int64_t pos = start + t;
            if (pos == 0) {
                const double* e = em + t * S;
                for (int i = 0; i < S; ++i) x[i] = m.initial[i] * e[i];
            } else if constexpr (Fixed > 0) {
                folded_fore(rows[t], fp, x);
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
                folded_back(rows[u + 1], bn, gg);
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
            if (!combine_posterior<Fixed>(fw + t * S, bw + t * S, S, posterior_.data() + t * S))
                impossible(m, contig, start + t);
        };
        interleaved_block(n, forward_at, backward_at, posterior_at);
        BlockView view;
        view.begin = start;
        view.size = n;
        view.states = S;
        view.bases = bases_.data();
        view.posterior = posterior_.data();
        view.forward = fw;
        view.backward = bw;
        view.emission = em;
        view.forward_before = k == 0 ? nullptr : before_.data();
        view.window = m.window;
        sink.block(view);
        copy_vec(fw + (n - 1) * S, S, before_.data());
    }
    result.log_likelihood = std::log(last_sum) + static_cast<double>(exponent) * ln2 + emission_scale;
    sink.end_contig(contig, result);
    return result;
}

// ---------------------------------------------------------------------------------------------
// Segmented decoding of long contigs (see decode.hpp): matrix sweeps per segment, a sequential
// chaining of boundary vectors, then independent forward sweeps per segment into sink forks.

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

PosteriorDecoder::~PosteriorDecoder() = default;

// What the matrix sweep and the chaining know about one segment [begin, end).
struct PosteriorDecoder::Segment {
    int64_t begin = 0, end = 0;
    std::vector<double> marks;  ///< per block: the S x S matrix at the block's last position
    std::vector<double> product;  ///< F_begin M_begin (segment 0: the row (pi * e_0) M_0)
    int64_t product_exponent = 0;  ///< product's true value is product * 2^exponent
    std::vector<double> end_vector;  ///< scaled backward vector at end - 1
    std::vector<double> before;      ///< scaled forward vector at begin - 1 (segments > 0)
    int64_t before_exponent = 0;
    double last_sum = 0;             ///< the forward sweep's last sum and exponent
    int64_t exponent = 0;
};

namespace {

// M = F_row M for each row in turn, the k-th row being row_at(k) for k < count (the matrix
// sweep's step); returns the exponent removed by rescaling. M is row-major S x S; its columns
// are independent vector recursions, so a step costs about as much time as one vector step of
// the sequential sweep. Sets failed = k when the k-th step makes the matrix all zero (the
// contig is impossible).
template <int S, typename RowAt>
inline int64_t matrix_steps(const double* folded, int64_t count, RowAt row_at, double* M, int64_t& failed) {
    constexpr int SS = S * S;
    double W[SS];
    for (int q = 0; q < SS; ++q) W[q] = M[q];
    int64_t exponent = 0;
    for (int64_t k = 0; k < count; ++k) {
        const double* F = folded + static_cast<size_t>(row_at(k)) * SS;
        double T[SS];
        for (int i = 0; i < S; ++i)
            for (int c = 0; c < S; ++c) {
                double acc = F[i * S] * W[c];
                for (int j = 1; j < S; ++j) acc += F[i * S + j] * W[j * S + c];
                T[i * S + c] = acc;
            }
        double s = T[0];
        for (int q = 1; q < SS; ++q) s += T[q];
        if (!(s > 0)) {
            failed = k;
            break;
        }
        if (s < rescale_below) {
            const int e = exponent_of(s);
            const double f = pow2(-e);
            for (int q = 0; q < SS; ++q) T[q] *= f;
            exponent += e;
        }
        for (int q = 0; q < SS; ++q) W[q] = T[q];
    }
    for (int q = 0; q < SS; ++q) M[q] = W[q];
    return exponent;
}

// One step with one row.
template <int S>
inline int64_t matrix_step(const double* folded, uint32_t row, double* M, int64_t& failed) {
    return matrix_steps<S>(folded, 1, [row](int64_t) { return row; }, M, failed);
}

// The steps of one block: M_t = F_{rows[t+1]} M_{t+1} for t = n-2 down to 0. On failure,
// failed = the position (in the block) whose row made the matrix zero.
template <int S>
inline int64_t matrix_steps_back(const double* folded, const uint32_t* rows, int64_t n, double* M,
                                 int64_t& failed) {
    const int64_t exponent = matrix_steps<S>(folded, n - 1, [rows, n](int64_t k) { return rows[n - 1 - k]; }, M, failed);
    if (failed >= 0) failed = n - 1 - failed;
    return exponent;
}

}  // namespace

bool PosteriorDecoder::splits(int64_t length) const { return segment_ > 0 && length > segment_; }

// The segments of a contig of length N: [k * segment, min(N, (k + 1) * segment)).
std::vector<PosteriorDecoder::Segment> PosteriorDecoder::make_segments(int64_t N) const {
    std::vector<Segment> segs(segment_count(N));
    for (size_t k = 0; k < segs.size(); ++k) {
        segs[k].begin = static_cast<int64_t>(k) * segment_;
        segs[k].end = std::min(N, segs[k].begin + segment_);
    }
    return segs;
}

size_t PosteriorDecoder::segment_count(int64_t length) const {
    return splits(length) ? static_cast<size_t>((length + segment_ - 1) / segment_) : 1;
}

// Runs task(k, workspace) for k in [first, last), in parallel when there is a pool; waits for
// all of them, then rethrows the first failure in segment order.
void PosteriorDecoder::size_workspaces(TaskPool* pool) {
    const int workers = pool ? pool->threads() : 1;
    while (static_cast<int>(workspaces_.size()) < workers) workspaces_.push_back(std::make_unique<Workspace>());
    for (auto& w : workspaces_) w->size(std::min(block_, segment_), model_.states);
}

void PosteriorDecoder::for_segments(size_t first, size_t last, TaskPool* pool,
                                    const std::function<void(size_t, Workspace&)>& task) {
    size_workspaces(pool);
    if (!pool) {
        for (size_t k = first; k < last; ++k) task(k, *workspaces_[0]);
        return;
    }
    std::vector<std::future<void>> done;
    for (size_t k = first; k < last; ++k)
        done.push_back(pool->submit([&, k](int w) { task(k, *workspaces_[static_cast<size_t>(w)]); }));
    for (auto& f : done) f.wait();
    for (auto& f : done) f.get();
}

template <int Fixed>
void PosteriorDecoder::matrix_sweeps(const Contig& contig, std::vector<Segment>& segs, size_t first, size_t last,
                                     TaskPool* pool) {
    constexpr int S = Fixed;
    constexpr int SS = S * S;
    const Model& m = model_;
    const int64_t B = std::min(block_, segment_);
    const TableLayout layout(m.max_order);
    const double* table = fast_emission_.data();
    const double* folded = folded_.data();
    // (a) Matrix sweep per segment: M = I at the segment's last position, M_t = F_{t+1} M_{t+1}.
    for_segments(first, last, pool, [&](size_t k, Workspace& ws) {
        Segment& sg = segs[k];
        if (!sg.marks.empty()) return;  // given (run_segments)
        const int64_t n_seg = sg.end - sg.begin;
        const int64_t nb = (n_seg + B - 1) / B;
        sg.marks.assign(static_cast<size_t>(nb) * SS, 0.0);
        double M[SS];
        int64_t mexp = 0;
        uint32_t next_row = 0;
        for (int64_t j = nb - 1; j >= 0; --j) {
            const int64_t start = sg.begin + j * B;
            const int64_t n = std::min(B, sg.end - start);
            fill_rows_of(m, contig, layout, start, n, ws.bases.data(), ws.rows.data());
            const uint32_t* rows = ws.rows.data();
            if (j == nb - 1) {
                for (int q = 0; q < SS; ++q) M[q] = 0.0;
                for (int i = 0; i < S; ++i) M[i * S + i] = 1.0;
            } else {
                int64_t failed = -1;
                mexp += matrix_step<S>(folded, next_row, M, failed);
                if (failed >= 0) impossible(m, contig, start + n);
            }
            std::copy(M, M + SS, sg.marks.begin() + j * SS);
            if (n >= 2) {
                int64_t failed = -1;
                // rows[n-1], ..., rows[1]: the steps to positions n-2, ..., 0
                mexp += matrix_steps_back<S>(folded, rows, n, M, failed);
                if (failed >= 0) impossible(m, contig, start + failed);
            }
            next_row = rows[0];
        }
        const auto step = [&](uint32_t row, int64_t pos) {
            int64_t failed = -1;
            mexp += matrix_step<S>(folded, row, M, failed);
            if (failed >= 0) impossible(m, contig, pos);
        };
        if (sg.begin == 0) {  // the row vector (pi * e_0) M_0
            const double* e = table + static_cast<size_t>(next_row) * S;
            sg.product.assign(S, 0.0);
            for (int c = 0; c < S; ++c) {
                double acc = m.initial[0] * e[0] * M[c];
                for (int i = 1; i < S; ++i) acc += m.initial[i] * e[i] * M[i * S + c];
                sg.product[c] = acc;
            }
            sg.product_exponent = mexp;
        } else {  // F_begin M_begin
            step(next_row, sg.begin);
            sg.product.assign(M, M + SS);
            sg.product_exponent = mexp;
        }
    });

}

template <int Fixed>
DecodeResult PosteriorDecoder::sweep_segments(const Contig& contig, std::vector<Segment>& segs, size_t first,
                                              size_t last, DecodeSink& sink, const SegmentTaker& take,
                                              TaskPool* pool) {
    constexpr int S = Fixed;
    constexpr int SS = S * S;
    const Model& m = model_;
    const int64_t B = std::min(block_, segment_);
    const TableLayout layout(m.max_order);
    const double* table = fast_emission_.data();
    const double* folded = folded_.data();
    const int workers = pool ? pool->threads() : 1;
    size_workspaces(pool);
    // (b) Chaining: backward vectors at segment ends from the contig end, forward vectors before
    // segment starts from the initial distribution.
    const size_t K = segs.size();
    segs[K - 1].end_vector.assign(S, 1.0);
    for (size_t k = K - 1; k-- > 0;) {
        const std::vector<double>& P = segs[k + 1].product;
        const std::vector<double>& b = segs[k + 1].end_vector;
        std::vector<double> v(S);
        double s = 0;
        for (int i = 0; i < S; ++i) {
            double acc = P[i * S] * b[0];
            for (int c = 1; c < S; ++c) acc += P[i * S + c] * b[c];
            v[i] = acc;
            s += acc;
        }
        if (!(s > 0)) impossible(m, contig, segs[k + 1].begin);
        if (s < rescale_below) rescale(v.data(), S, s);
        segs[k].end_vector = std::move(v);
    }
    {
        std::vector<double> a = segs[0].product;
        int64_t aexp = segs[0].product_exponent;
        for (size_t k = 1; k < K; ++k) {
            if (k > 1) {
                const std::vector<double>& P = segs[k - 1].product;
                std::vector<double> v(S);
                for (int c = 0; c < S; ++c) {
                    double acc = a[0] * P[c];
                    for (int i = 1; i < S; ++i) acc += a[i] * P[i * S + c];
                    v[c] = acc;
                }
                a = std::move(v);
                aexp += segs[k - 1].product_exponent;
            }
            const double s = sum_of(a.data(), S);
            if (!(s > 0)) impossible(m, contig, segs[k].begin - 1);
            if (s < rescale_below) aexp += rescale(a.data(), S, s);
            segs[k].before = a;
            segs[k].before_exponent = aexp;
        }
    }

    // (c) Forward sweep per segment with backward recomputation inside each block, into a fork.
    const auto sweep = [&](size_t k, Workspace& ws, DecodeSink& out) {
        Segment& sg = segs[k];
        const int64_t nb = (sg.end - sg.begin + B - 1) / B;
        std::array<double, S> fp{}, x{}, bn{}, gg{}, before{};
        int64_t exponent = sg.before_exponent;
        double last_sum = 0;
        if (k > 0) std::copy(sg.before.begin(), sg.before.end(), fp.begin());
        for (int64_t j = 0; j < nb; ++j) {
            const int64_t start = sg.begin + j * B;
            const int64_t n = std::min(B, sg.end - start);
            fill_rows_of(m, contig, layout, start, n, ws.bases.data(), ws.rows.data());
            const uint32_t* rows = ws.rows.data();
            double* em = ws.emission.data();
            for (int64_t t = 0; t < n; ++t) {
                const double* src = table + static_cast<size_t>(rows[t]) * S;
                for (int s2 = 0; s2 < S; ++s2) em[t * S + s2] = src[s2];
            }
            double* bw = ws.backward.data();
            double* fw = ws.forward.data();
            {  // checkpoint: the block-end matrix times the segment's end vector
                const double* Mj = sg.marks.data() + j * SS;
                const double* e = sg.end_vector.data();
                double* c = bw + (n - 1) * S;
                for (int i = 0; i < S; ++i) {
                    double acc = Mj[i * S] * e[0];
                    for (int c2 = 1; c2 < S; ++c2) acc += Mj[i * S + c2] * e[c2];
                    c[i] = acc;
                }
                const double s = sum_of(c, S);
                if (!(s > 0)) impossible(m, contig, start + n - 1);
                if (s < rescale_below) rescale(c, S, s);
                copy_vec(c, S, bn.data());
            }
            copy_vec(fp.data(), S, before.data());
            const auto forward_at = [&](int64_t t) {
                const int64_t pos = start + t;
                if (pos == 0) {
                    const double* e = em + t * S;
                    for (int i = 0; i < S; ++i) x[i] = m.initial[i] * e[i];
                } else {
                    const double* F = folded + static_cast<size_t>(rows[t]) * SS;
                    for (int c = 0; c < S; ++c) x[c] = fp[0] * F[c];
                    for (int i = 1; i < S; ++i)
                        for (int c = 0; c < S; ++c) x[c] += fp[i] * F[i * S + c];
                }
                double s = sum_of(x.data(), S);
                if (!(s > 0)) impossible(m, contig, pos);
                if (s < rescale_below) {
                    exponent += rescale(x.data(), S, s);
                    s = sum_of(x.data(), S);
                }
                last_sum = s;
                double* f = fw + t * S;
                for (int i = 0; i < S; ++i) f[i] = fp[i] = x[i];
            };
            const auto backward_at = [&](int64_t u) {  // from bn = backward at u + 1
                const double* F = folded + static_cast<size_t>(rows[u + 1]) * SS;
                for (int i = 0; i < S; ++i) {
                    double acc = F[i * S] * bn[0];
                    for (int c = 1; c < S; ++c) acc += F[i * S + c] * bn[c];
                    gg[i] = acc;
                }
                copy_vec(gg.data(), S, bn.data());
                const double s = sum_of(bn.data(), S);
                if (s < rescale_below) rescale(bn.data(), S, s);
                copy_vec(bn.data(), S, bw + u * S);
            };
            const auto posterior_at = [&](int64_t t) {
                if (!combine_posterior<Fixed>(fw + t * S, bw + t * S, S, ws.posterior.data() + t * S))
                    impossible(m, contig, start + t);
            };
            interleaved_block(n, forward_at, backward_at, posterior_at);
            BlockView view;
            view.begin = start;
            view.size = n;
            view.states = S;
            view.bases = ws.bases.data();
            view.posterior = ws.posterior.data();
            view.forward = fw;
            view.backward = bw;
            view.emission = em;
            view.forward_before = start == 0 ? nullptr : before.data();
            out.block(view);
        }
        sg.last_sum = last_sum;
        sg.exponent = exponent;
    };
    // At most workers + 1 forks hold results at once; they are joined in order.
    struct Pending {
        size_t segment = 0;
        std::unique_ptr<DecodeSink> fork;
        std::future<void> done;
    };
    std::deque<Pending> window;
    const auto wait_all = [&] {
        for (auto& p : window)
            if (p.done.valid()) p.done.wait();
    };
    try {
        for (size_t k = first; k < last; ++k) {
            while (window.size() > static_cast<size_t>(workers)) {
                window.front().done.get();
                take(window.front().segment, *window.front().fork);
                window.pop_front();
            }
            Pending p;
            p.segment = k;
            p.fork = sink.fork();
            if (!p.fork) throw InternalError("decoder: a sink stopped being forkable");
            p.fork->begin_contig(contig);
            DecodeSink* out = p.fork.get();
            if (pool) {
                p.done = pool->submit([&, k, out](int w) { sweep(k, *workspaces_[static_cast<size_t>(w)], *out); });
            } else {
                std::promise<void> ready;
                sweep(k, *workspaces_[0], *out);
                ready.set_value();
                p.done = ready.get_future();
            }
            window.push_back(std::move(p));
        }
        while (!window.empty()) {
            window.front().done.get();
            take(window.front().segment, *window.front().fork);
            window.pop_front();
        }
    } catch (...) {
        wait_all();  // tasks still running use this frame's data
        throw;
    }
    DecodeResult result;
    result.log_likelihood = std::numeric_limits<double>::quiet_NaN();
    if (last == K) {
        const Segment& final_segment = segs[K - 1];
        result.log_likelihood =
            std::log(final_segment.last_sum) + static_cast<double>(final_segment.exponent) * ln2;
    }
    return result;
}

template <int Fixed>
DecodeResult PosteriorDecoder::run_segmented(const Contig& contig, DecodeSink& sink, TaskPool* pool) {
    static_assert(Fixed > 0, "segmented decoding needs a compile-time state count");
    if (fast_emission_.empty() || folded_.empty())
        throw InternalError("decoder: emission table missing for a small model");
    sink.begin_contig(contig);
    std::vector<Segment> segs = make_segments(contig.length);
    matrix_sweeps<Fixed>(contig, segs, 0, segs.size(), pool);
    const DecodeResult result = sweep_segments<Fixed>(
        contig, segs, 0, segs.size(), sink, [&](size_t, DecodeSink& fork) { sink.join(fork); }, pool);
    sink.end_contig(contig, result);
    return result;
}

namespace {

// Calls f(std::integral_constant<int, S>) for the model's state count (1..max_fixed_states).
template <typename F>
decltype(auto) with_fixed_states(int states, F&& f) {
    switch (states) {
        case 1: return f(std::integral_constant<int, 1>{});
        case 2: return f(std::integral_constant<int, 2>{});
        case 3: return f(std::integral_constant<int, 3>{});
        case 4: return f(std::integral_constant<int, 4>{});
        case 5: return f(std::integral_constant<int, 5>{});
        case 6: return f(std::integral_constant<int, 6>{});
        default: throw InternalError("decoder: segments need a model of at most 6 states");
    }
}

}  // namespace

std::vector<SegmentSeam> PosteriorDecoder::seams(const Contig& contig, size_t first, size_t last, TaskPool* pool) {
    std::vector<Segment> segs = make_segments(contig.length);
    if (!splits(contig.length) || first > last || last > segs.size())
        throw InternalError("PosteriorDecoder::seams: not a split contig or a bad segment range");
    with_fixed_states(model_.states, [&](auto fixed) {
        matrix_sweeps<decltype(fixed)::value>(contig, segs, first, last, pool);
    });
    std::vector<SegmentSeam> out;
    for (size_t k = first; k < last; ++k)
        out.push_back({segs[k].begin, segs[k].end, std::move(segs[k].product), segs[k].product_exponent,
                       std::move(segs[k].marks), bases_crc32(contig, segs[k].begin, segs[k].end)});
    return out;
}

uint32_t PosteriorDecoder::bases_crc32(const Contig& contig, int64_t begin, int64_t end) const {
    uLong crc = crc32(0L, Z_NULL, 0);
    std::vector<uint8_t> codes;
    constexpr int64_t piece = int64_t{1} << 20;
    for (int64_t at = std::max<int64_t>(0, begin - model_.max_order); at < end; at += piece) {
        const int64_t n = std::min(piece, end - at);
        codes.resize(static_cast<size_t>(n));
        contig.unpack(at, n, codes.data());
        crc = crc32(crc, codes.data(), static_cast<uInt>(n));
    }
    return static_cast<uint32_t>(crc);
}

DecodeResult PosteriorDecoder::run_segments(const Contig& contig, const std::vector<SegmentSeam>& all, size_t first,
                                            size_t last, DecodeSink& sink, const SegmentTaker& take,
                                            TaskPool* pool) {
    std::vector<Segment> segs = make_segments(contig.length);
    if (!splits(contig.length) || first >= last || last > segs.size())
        throw InternalError("PosteriorDecoder::run_segments: not a split contig or a bad segment range");
    if (all.size() != segs.size())
        throw InputError(fmt::format("record '{}': the seams given have {} segments, the record has {}; they "
                                     "come from another input or other options",
                                     contig.name, all.size(), segs.size()));
    const size_t S = static_cast<size_t>(model_.states);
    const int64_t B = std::min(block_, segment_);
    const auto mismatch = [&](size_t k) {
        return InputError(fmt::format(
            "record '{}', segment {} ({}-{}): the seams given do not match this sequence; they come from another "
            "input, profile or --block/--bin",
            contig.name, k + 1, segs[k].begin, segs[k].end));
    };
    // This process's segments with marks from step 1 skip their matrix sweep, once their bases
    // are those the marks were made from.
    std::vector<bool> given_marks(segs.size(), false);
    for (size_t k = first; k < last; ++k) {
        const SegmentSeam& given = all[k];
        if (given.marks.empty()) continue;
        const auto blocks = static_cast<size_t>((segs[k].end - segs[k].begin + B - 1) / B);
        if (given.marks.size() != blocks * S * S || given.bases_crc32 != bases_crc32(contig, segs[k].begin, segs[k].end))
            throw mismatch(k);
        segs[k].marks = given.marks;
        segs[k].product = given.product;
        segs[k].product_exponent = given.exponent;
        given_marks[k] = true;
    }
    return with_fixed_states(model_.states, [&](auto fixed) {
        matrix_sweeps<decltype(fixed)::value>(contig, segs, first, last, pool);
        for (size_t k = 0; k < segs.size(); ++k) {
            Segment& sg = segs[k];
            const SegmentSeam& given = all[k];
            const bool mine = k >= first && k < last;
            const bool fits = given.begin == sg.begin && given.end == sg.end &&
                              given.product.size() == (k == 0 ? S : S * S);
            // Recomputed seams must be bit for bit those given: otherwise the other processes
            // saw another sequence, profile or options, and the boundary vectors would be wrong.
            if (!fits || (mine && !given_marks[k] &&
                          (given.product != sg.product || given.exponent != sg.product_exponent)))
                throw mismatch(k);
            if (!mine) {
                sg.product = given.product;
                sg.product_exponent = given.exponent;
            }
        }
        return sweep_segments<decltype(fixed)::value>(contig, segs, first, last, sink, take, pool);
    });
}

ViterbiDecoder::ViterbiDecoder(const Model& model, DecoderOptions options)
    : model_(model), block_(choose_block(model, options.block_size)),
      fast_emission_(build_fast_emission_table(model)) {}

DecodeResult ViterbiDecoder::run(const Contig& contig, DecodeSink& sink) {
    const Model& m = model_;
    const int S = m.states;
    const int64_t N = m.positions(contig.length);
    DecodeResult result;
    sink.begin_contig(contig);
    if (N == 0) {
        sink.end_contig(contig, result);
        return result;
    }
    constexpr double neg_inf = -std::numeric_limits<double>::infinity();
    std::vector<double> log_a(m.transitions.size()), log_pi(S);
    for (size_t i = 0; i < log_a.size(); ++i) log_a[i] = m.transitions[i] > 0 ? std::log(m.transitions[i]) : neg_inf;
    for (int i = 0; i < S; ++i) log_pi[i] = m.initial[i] > 0 ? std::log(m.initial[i]) : neg_inf;
    // Sparse models (duration chains) read only the non-zero incoming transitions: linear
    // instead of quadratic in the chain length. The lists are in increasing source order, so
    // ties still go to the lower state index.
    const bool sparse = use_sparse(m);
    std::vector<double> log_in(m.in_prob.size());
    for (size_t e = 0; e < log_in.size(); ++e) log_in[e] = std::log(m.in_prob[e]);

    const int64_t B = block_;
    const int64_t blocks = (N + B - 1) / B;
    std::vector<uint8_t> bases(B);
    std::vector<double> emission(static_cast<size_t>(B) * S);
    std::vector<double> checkpoints(static_cast<size_t>(blocks) * S);
    std::vector<double> prev(S), cur(S);
    std::vector<int32_t> pointers(static_cast<size_t>(B) * S);
    double offset = 0;  // sum of the maxima removed at block ends (keeps scores near 0)

    // Runs the recursion over block k from `prev` (the normalised scores at the end of block
    // k-1); records back-pointers when asked; leaves the normalised scores in `prev`.
    const auto run_block = [&](int64_t k, bool record) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        // Window models: log emissions (a window's states can differ by more than a double spans).
        if (m.window > 0)
            fill_window_log_emissions(m, contig, start, n, bases.data(), emission.data());
        else
            fill_emissions(m, contig, start, n, bases.data(), emission.data(), &fast_emission_);
        for (int64_t t = 0; t < n; ++t) {
            const int64_t pos = start + t;
            const double* e = emission.data() + t * S;
            double best_all = neg_inf;
            for (int j = 0; j < S; ++j) {
                double best = neg_inf;
                int arg = 0;
                if (pos == 0) {
                    best = log_pi[j];
                } else if (sparse) {
                    for (int e2 = m.in_begin[j]; e2 < m.in_begin[j + 1]; ++e2) {
                        const double v = prev[m.in_from[e2]] + log_in[e2];
                        if (v > best) {
                            best = v;
                            arg = m.in_from[e2];
                        }
                    }
                } else {
                    for (int i = 0; i < S; ++i) {
                        const double v = prev[i] + log_a[static_cast<size_t>(i) * S + j];
                        if (v > best) {
                            best = v;
                            arg = i;
                        }
                    }
                }
                cur[j] = best + (m.window > 0 ? e[j] : e[j] > 0 ? std::log(e[j]) : neg_inf);
                if (record) pointers[static_cast<size_t>(t) * S + j] = arg;
                best_all = std::max(best_all, cur[j]);
            }
            if (best_all == neg_inf) impossible(m, contig, pos);
            std::swap(prev, cur);
        }
        return n;
    };

    for (int64_t k = 0; k < blocks; ++k) {
        run_block(k, false);
        const double top = *std::max_element(prev.begin(), prev.end());
        for (auto& v : prev) v -= top;
        offset += top;
        std::copy(prev.begin(), prev.end(), checkpoints.begin() + k * S);
    }
    result.log_likelihood = offset;

    // Trace back block by block from the end; the path is kept as runs of one state.
    struct Run {
        int64_t begin;
        int state;
    };
    std::vector<Run> runs;  // built from the end backwards
    int state = static_cast<int>(std::max_element(prev.begin(), prev.end()) - prev.begin());
    for (int64_t k = blocks - 1; k >= 0; --k) {
        if (k > 0)
            std::copy(checkpoints.begin() + (k - 1) * S, checkpoints.begin() + k * S, prev.begin());
        const int64_t n = run_block(k, true);
        for (int64_t t = n - 1; t >= 0; --t) {
            const int64_t pos = k * B + t;
            if (runs.empty() || runs.back().state != state)
                runs.push_back({pos, state});
            else
                runs.back().begin = pos;
            if (pos > 0) state = pointers[static_cast<size_t>(t) * S + state];
        }
    }
    std::reverse(runs.begin(), runs.end());

    std::vector<double> indicator(static_cast<size_t>(B) * S);
    size_t r = 0;
    for (int64_t k = 0; k < blocks; ++k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        if (m.window > 0)
            fill_emissions(m, contig, start, n, bases.data(), emission.data());  // window flags
        else
            contig.unpack(start, n, bases.data());
        std::fill(indicator.begin(), indicator.end(), 0.0);
        for (int64_t t = 0; t < n; ++t) {
            while (r + 1 < runs.size() && runs[r + 1].begin <= start + t) ++r;
            indicator[static_cast<size_t>(t) * S + runs[r].state] = 1.0;
        }
        BlockView view;
        view.begin = start;
        view.size = n;
        view.states = S;
        view.bases = bases.data();
        view.posterior = indicator.data();
        view.window = m.window;
        sink.block(view);
    }
    sink.end_contig(contig, result);
    return result;
}

}  // namespace tidemark
