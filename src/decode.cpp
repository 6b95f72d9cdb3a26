// Posterior decoding by checkpointed scaled forward-backward: the sink fan-out, emission tables,
// and unsplit decoding (segmented decoding: decode_segments.cpp; Viterbi: viterbi.cpp).
#include "tidemark/decode.hpp"

#include "decode_internal.hpp"
#include "tidemark/window.hpp"

namespace tidemark {

using namespace detail;

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
    if (!other || other->sinks_.size() != sinks_.size())
        throw InternalError("SinkFanout::join: not a fork of this fanout");
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
    RollingContext ctx = context_before(contig, begin, K);
    contig.unpack(begin, n, bases);
    const double* fast = (fast_table && !fast_table->empty()) ? fast_table->data() : nullptr;
    for (int64_t t = 0; t < n; ++t) {
        const uint8_t b = bases[t];
        double* row = emission + t * S;
        if (b == base_unknown) {
            for (int s = 0; s < S; ++s) row[s] = 1.0;  // marginalised: sums to 1 over bases
        } else if (fast && ctx.complete(K)) {
            std::memcpy(row, fast + (static_cast<size_t>(ctx.code) * 4 + b) * S,
                        sizeof(double) * S);
        } else {
            for (int s = 0; s < S; ++s) row[s] = m.emission_prob(s, ctx.code, ctx.valid, b);
        }
        ctx.push(b);
    }
    return 0;
}

namespace {

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

// folded with each S x S matrix transposed: the backward step's lanes load its columns.
std::vector<double> transpose_each(const std::vector<double>& folded, int states) {
    const size_t S = static_cast<size_t>(states);
    std::vector<double> out(folded.size());
    for (size_t r = 0; r < folded.size() / (S * S); ++r)
        for (size_t i = 0; i < S; ++i)
            for (size_t j = 0; j < S; ++j) out[(r * S + j) * S + i] = folded[(r * S + i) * S + j];
    return out;
}

// Segments hold whole blocks except at their ends; 16 blocks make the matrix checkpoints and
// the per-segment scheduling negligible next to the work.
constexpr int64_t blocks_per_segment = 16;

int64_t choose_segment(const Model& m, int64_t block, const DecoderOptions& o) {
    if (o.segment_size < 0 || m.states > max_fixed_states) return 0;
    const int64_t multiple = std::max<int64_t>(1, o.segment_multiple);
    // At least 64 Ki positions: tiny --block values must not make millions of segments (each
    // has its own sink forks).
    const int64_t want = o.segment_size > 0
                             ? o.segment_size
                             : std::max<int64_t>(blocks_per_segment * block, int64_t{1} << 16);
    return (want + multiple - 1) / multiple * multiple;
}

// c = b(pos - 1) from c = b(pos) on the transposed folded matrices (sweep 1 of unsplit
// decoding), rescaled like every backward step.
template <int S, class V>
[[gnu::always_inline]] inline void backward_step(const Model& m, const Contig& contig,
                                                 const double* columns, uint32_t row, int64_t pos,
                                                 V& c) {
    V x;
    backward_lanes<S>(columns + row * static_cast<size_t>(S * S), c, x);
    c = x;
    if (surely_at_least<S>(c, rescale_below)) return;
    const double s = lane_sum<S>(c);
    if (!(s > 0)) impossible(m, contig, pos);
    if (s < rescale_below) rescale_lanes<S>(c, s);
}

// The steps into block [start, start + n), on the S doubles b: b(start + n) on entry (unused
// when last), b(start) on exit, and b(start + n - 1) stored to checkpoint. Compiled also for
// AVX2 (use_avx2_kernels).
template <int S, bool Avx2>
[[gnu::always_inline]] inline void backward_steps_body(const Model& m, const Contig& contig,
                                                       const double* columns, const uint32_t* rows,
                                                       uint32_t next_row, int64_t start, int64_t n,
                                                       bool last, double* b, double* checkpoint) {
    KernelVector<S, Avx2> c;
    if (last) {
        for (int i = 0; i < S; ++i) c[i] = 1.0;
    } else {
        load_lanes<S>(b, c);
        backward_step<S>(m, contig, columns, next_row, start + n, c);
    }
    store_lanes<S>(c, checkpoint);
    for (int64_t t = n - 2; t >= 0; --t)
        backward_step<S>(m, contig, columns, rows[t + 1], start + t + 1, c);
    store_lanes<S>(c, b);
}

template <int S>
[[gnu::noinline]] void backward_steps_portable(const Model& m, const Contig& contig,
                                               const double* columns, const uint32_t* rows,
                                               uint32_t next_row, int64_t start, int64_t n,
                                               bool last, double* b, double* checkpoint) {
    backward_steps_body<S, false>(m, contig, columns, rows, next_row, start, n, last, b,
                                  checkpoint);
}
#if TIDEMARK_AVX2_KERNELS
template <int S>
[[gnu::noinline, gnu::target("avx2")]] void backward_steps_avx2(
    const Model& m, const Contig& contig, const double* columns, const uint32_t* rows,
    uint32_t next_row, int64_t start, int64_t n, bool last, double* b, double* checkpoint) {
    backward_steps_body<S, true>(m, contig, columns, rows, next_row, start, n, last, b, checkpoint);
}
#endif

template <int S>
void backward_steps(const Model& m, const Contig& contig, const double* columns,
                    const uint32_t* rows, uint32_t next_row, int64_t start, int64_t n, bool last,
                    double* b, double* checkpoint) {
#if TIDEMARK_AVX2_KERNELS
    if (use_avx2_kernels())
        return backward_steps_avx2<S>(m, contig, columns, rows, next_row, start, n, last, b,
                                      checkpoint);
#endif
    backward_steps_portable<S>(m, contig, columns, rows, next_row, start, n, last, b, checkpoint);
}

}  // namespace

PosteriorDecoder::PosteriorDecoder(const Model& model, DecoderOptions options)
    : model_(model),
      block_(choose_block(model, options.block_size)),
      segment_(choose_segment(model, block_, options)),
      fast_emission_(build_decoder_table(model)),
      folded_(model.states <= max_fixed_states ? fold_transitions(model, fast_emission_)
                                               : std::vector<double>{}),
      folded_columns_(transpose_each(folded_, model.states)) {
    if (fast_emission_.empty() || folded_.empty()) segment_ = 0;
}

DecodeResult PosteriorDecoder::run(const Contig& contig, DecodeSink& sink, TaskPool* pool,
                                   EarlySweeps* early) {
    const bool segmented = model_.window == 0 && model_.states <= max_fixed_states &&
                           splits(contig.length) && sink.fork();
    if (early && !segmented) early->reset();  // e.g. a sink that cannot fork: one pass
    // Window models: few positions (one per window), emissions kept as logs (decode_windows).
    if (model_.window > 0) return decode_windows(model_, block_, contig, sink);
    if (model_.states > max_fixed_states) return run_fixed<0>(contig, sink);
    return with_fixed_states(model_.states, [&](auto fixed) {
        constexpr int S = decltype(fixed)::value;
        return segmented ? run_segmented<S>(contig, sink, pool, early) : run_fixed<S>(contig, sink);
    });
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
    Vec<Fixed> fprev(S);
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
    // Emissions of the block (for the generic recursions and for the sinks).
    const auto fill_block = [&](int64_t start, int64_t n) {
        if (!table) {
            fill_emissions(m, contig, start, n, bases_.data(), emission_.data());
            return;
        }
        fill_rows(start, n);
        double* out = emission_.data();
        for (int64_t t = 0; t < n; ++t, out += S) {
            const double* src = table + static_cast<size_t>(rows_[t]) * S;
            for (int s = 0; s < S; ++s) out[s] = src[s];
        }
    };
    // Sweep 1, backward over the whole contig: keep the scaled backward vector at the last
    // position of every block. The fixed-size path carries b(t+1) across positions and blocks,
    // the generic path g = e(t+1) * b(t+1).
    if constexpr (Fixed > 0) {
        const double* columns = folded_columns_.data();
        std::array<double, Fixed> b{};  // b(start + n) between blocks
        for (int64_t k = blocks - 1; k >= 0; --k) {
            const int64_t start = k * B;
            const int64_t n = std::min(B, N - start);
            const uint32_t next_row = rows_[0];  // row of position start + n, from block k + 1
            fill_rows(start, n);
            backward_steps<Fixed>(m, contig, columns, rows_.data(), next_row, start, n,
                                  start + n == N, b.data(), checkpoints_.data() + k * S);
        }
    } else {
        Vec<0> g(S), cur(S);
        double* c = cur.data();
        double* gg = g.data();
        for (int64_t k = blocks - 1; k >= 0; --k) {
            const int64_t start = k * B;
            const int64_t n = std::min(B, N - start);
            fill_block(start, n);
            const double* em = emission_.data();
            for (int64_t t = n - 1; t >= 0; --t) {
                const int64_t pos = start + t;
                if (pos == N - 1) {
                    for (int i = 0; i < S; ++i) c[i] = 1.0;
                } else {
                    step_backward(m, A, sparse, gg, c);
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
    for (int64_t k = 0; k < blocks; ++k) {
        const int64_t start = k * B;
        const int64_t n = std::min(B, N - start);
        fill_block(start, n);
        double* bw = backward_.data();
        double* fw = forward_.data();
        copy_vec(checkpoints_.data() + k * S, S, bw + (n - 1) * S);
        if (k > 0) copy_vec(before_.data(), S, fprev.data());
        sweep_block<Fixed>({m, contig, A, sparse, folded, folded_columns_.data(), start, n,
                            rows_.data(), emission_.data(), fw, bw, posterior_.data(), fprev.data(),
                            exponent, last_sum});
        BlockView view;
        view.begin = start;
        view.size = n;
        view.states = S;
        view.bases = bases_.data();
        view.posterior = posterior_.data();
        view.forward = fw;
        view.backward = bw;
        view.emission = emission_.data();
        view.forward_before = k == 0 ? nullptr : before_.data();
        sink.block(view);
        copy_vec(fw + (n - 1) * S, S, before_.data());
    }
    result.log_likelihood = std::log(last_sum) + static_cast<double>(exponent) * ln2;
    sink.end_contig(contig, result);
    return result;
}

}  // namespace tidemark
