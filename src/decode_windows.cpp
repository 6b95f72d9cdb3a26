// Posterior decoding of window models: the checkpointed forward-backward of decode.cpp with the
// vectors kept as logs (see decode_windows in decode_internal.hpp for why).
#include <limits>

#include "decode_internal.hpp"
#include "tidemark/window.hpp"

namespace tidemark::detail {
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
}  // namespace

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

}  // namespace tidemark::detail
