// Posterior decoding by checkpointed scaled forward-backward, and bounded-memory Viterbi.
#include "tidemark/decode.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>

#include "tidemark/error.hpp"

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

// Multiplies v by the power of two that brings its sum into [0.5, 1); returns the exponent
// removed. Exact in binary floating point, so it adds no rounding error.
inline int rescale(double* v, int S, double sum) {
    int e = 0;
    std::frexp(sum, &e);
    const double f = std::ldexp(1.0, -e);
    for (int i = 0; i < S; ++i) v[i] *= f;
    return e;
}

[[noreturn]] void impossible(const Model& m, const Contig& c, int64_t pos) {
    throw InputError(fmt::format(
        "contig '{}': the sequence is impossible under profile '{}' at or near position {} "
        "(every state path has probability 0); a state with a zero emission or transition "
        "probability cannot explain it",
        c.name, m.name, c.offset + pos + 1));
}

bool use_sparse(const Model& m) {
    return 2 * m.in_from.size() < static_cast<size_t>(m.states) * static_cast<size_t>(m.states);
}

// out_j = sum_i prev_i A_ij
template <int Fixed>
inline void step_forward(const Model& m, bool sparse, const double* prev, double* out) {
    const int S = Fixed > 0 ? Fixed : m.states;
    const double* A = m.transitions.data();
    if (Fixed == 0 && sparse) {
        for (int j = 0; j < S; ++j) {
            double acc = 0;
            for (int e = m.in_begin[j]; e < m.in_begin[j + 1]; ++e) acc += prev[m.in_from[e]] * m.in_prob[e];
            out[j] = acc;
        }
        return;
    }
    for (int j = 0; j < S; ++j) out[j] = 0;
    for (int i = 0; i < S; ++i) {
        const double p = prev[i];
        const double* row = A + static_cast<size_t>(i) * S;
        for (int j = 0; j < S; ++j) out[j] += p * row[j];
    }
}

// out_i = sum_j A_ij g_j
template <int Fixed>
inline void step_backward(const Model& m, bool sparse, const double* g, double* out) {
    const int S = Fixed > 0 ? Fixed : m.states;
    const double* A = m.transitions.data();
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
        double acc = 0;
        for (int j = 0; j < S; ++j) acc += row[j] * g[j];
        out[i] = acc;
    }
}

inline double sum_of(const double* v, int S) {
    double s = 0;
    for (int i = 0; i < S; ++i) s += v[i];
    return s;
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

std::vector<double> build_fast_emission_table(const Model& m) {
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

void fill_emissions(const Model& m, const Contig& contig, int64_t begin, int64_t n,
                    uint8_t* bases, double* emission, const std::vector<double>* fast_table) {
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
}

PosteriorDecoder::PosteriorDecoder(const Model& model, DecoderOptions options)
    : model_(model), block_(choose_block(model, options.block_size)),
      fast_emission_(build_fast_emission_table(model)) {}

DecodeResult PosteriorDecoder::run(const Contig& contig, DecodeSink& sink) {
    switch (model_.states) {
        case 1: return run_fixed<1>(contig, sink);
        case 2: return run_fixed<2>(contig, sink);
        case 3: return run_fixed<3>(contig, sink);
        case 4: return run_fixed<4>(contig, sink);
        case 5: return run_fixed<5>(contig, sink);
        case 6: return run_fixed<6>(contig, sink);
        default: return run_fixed<0>(contig, sink);
    }
}

template <int Fixed>
DecodeResult PosteriorDecoder::run_fixed(const Contig& contig, DecodeSink& sink) {
    const Model& m = model_;
    const int S = Fixed > 0 ? Fixed : m.states;
    const bool sparse = use_sparse(m);
    const int64_t N = contig.length;
    DecodeResult result;
    sink.begin_contig(contig);
    if (N == 0) {
        sink.end_contig(contig, result);
        return result;
    }
    const int64_t B = block_;
    const int64_t blocks = (N + B - 1) / B;
    const size_t BS = static_cast<size_t>(B) * S;
    bases_.resize(B);
    emission_.resize(BS);
    forward_.resize(BS);
    backward_.resize(BS);
    posterior_.resize(BS);
    checkpoints_.resize(static_cast<size_t>(blocks) * S);
    before_.resize(S);
    std::vector<double> g(S), cur(S);

    // Sweep 1, backward over the whole contig: keep the scaled backward vector at the last
    // position of every block. g carries e(t+1) * b(t+1) across positions and blocks.
    for (int64_t k = blocks - 1; k >= 0; --k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        fill_emissions(m, contig, start, n, bases_.data(), emission_.data(), &fast_emission_);
        for (int64_t t = n - 1; t >= 0; --t) {
            const int64_t pos = start + t;
            if (pos == N - 1) {
                std::fill(cur.begin(), cur.end(), 1.0);
            } else {
                step_backward<Fixed>(m, sparse, g.data(), cur.data());
                const double s = sum_of(cur.data(), S);
                if (!(s > 0)) impossible(m, contig, pos + 1);
                if (s < rescale_below) rescale(cur.data(), S, s);
            }
            if (t == n - 1) std::copy(cur.begin(), cur.end(), checkpoints_.begin() + k * S);
            const double* e = emission_.data() + t * S;
            for (int i = 0; i < S; ++i) g[i] = e[i] * cur[i];
        }
    }

    // Sweep 2, forward block by block: rebuild the block's backward vectors from its
    // checkpoint, run the forward recursion, combine, hand the block to the sink.
    int64_t exponent = 0;
    double last_sum = 0;
    for (int64_t k = 0; k < blocks; ++k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        fill_emissions(m, contig, start, n, bases_.data(), emission_.data(), &fast_emission_);
        double* bw = backward_.data();
        double* fw = forward_.data();
        const double* em = emission_.data();
        std::copy(checkpoints_.begin() + k * S, checkpoints_.begin() + (k + 1) * S, bw + (n - 1) * S);
        for (int64_t t = n - 2; t >= 0; --t) {
            const double* e = em + (t + 1) * S;
            const double* next = bw + (t + 1) * S;
            for (int i = 0; i < S; ++i) g[i] = e[i] * next[i];
            double* b = bw + t * S;
            step_backward<Fixed>(m, sparse, g.data(), b);
            const double s = sum_of(b, S);
            if (s < rescale_below) rescale(b, S, s);
        }
        for (int64_t t = 0; t < n; ++t) {
            const int64_t pos = start + t;
            double* f = fw + t * S;
            const double* e = em + t * S;
            if (pos == 0) {
                for (int i = 0; i < S; ++i) f[i] = m.initial[i];
            } else {
                step_forward<Fixed>(m, sparse, t == 0 ? before_.data() : f - S, f);
            }
            for (int i = 0; i < S; ++i) f[i] *= e[i];
            double s = sum_of(f, S);
            if (!(s > 0)) impossible(m, contig, pos);
            if (s < rescale_below) {
                exponent += rescale(f, S, s);
                s = sum_of(f, S);
            }
            last_sum = s;
            const double* b = bw + t * S;
            double* p = posterior_.data() + t * S;
            double dot = 0;
            for (int i = 0; i < S; ++i) dot += f[i] * b[i];
            if (!(dot > 0)) impossible(m, contig, pos);
            const double inv = 1.0 / dot;
            for (int i = 0; i < S; ++i) p[i] = f[i] * b[i] * inv;
        }
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
        sink.block(view);
        std::copy(fw + (n - 1) * S, fw + n * S, before_.begin());
    }
    result.log_likelihood = std::log(last_sum) + static_cast<double>(exponent) * ln2;
    sink.end_contig(contig, result);
    return result;
}

ViterbiDecoder::ViterbiDecoder(const Model& model, DecoderOptions options)
    : model_(model), block_(choose_block(model, options.block_size)),
      fast_emission_(build_fast_emission_table(model)) {}

DecodeResult ViterbiDecoder::run(const Contig& contig, DecodeSink& sink) {
    const Model& m = model_;
    const int S = m.states;
    const int64_t N = contig.length;
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
                } else {
                    for (int i = 0; i < S; ++i) {
                        const double v = prev[i] + log_a[static_cast<size_t>(i) * S + j];
                        if (v > best) {
                            best = v;
                            arg = i;
                        }
                    }
                }
                cur[j] = best + (e[j] > 0 ? std::log(e[j]) : neg_inf);
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
        sink.block(view);
    }
    sink.end_contig(contig, result);
    return result;
}

}  // namespace tidemark
