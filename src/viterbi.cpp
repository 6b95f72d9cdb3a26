// Viterbi decoding: the most probable state path in log space, with one score checkpoint per
// block and back-pointers for one block at a time.
#include <limits>

#include "decode_internal.hpp"
#include "tidemark/window.hpp"

namespace tidemark {

using namespace detail;

ViterbiDecoder::ViterbiDecoder(const Model& model, DecoderOptions options)
    : model_(model),
      block_(choose_block(model, options.block_size)),
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
    for (size_t i = 0; i < log_a.size(); ++i)
        log_a[i] = m.transitions[i] > 0 ? std::log(m.transitions[i]) : neg_inf;
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
