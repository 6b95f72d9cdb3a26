// Training M-step of window signatures: per state and context, the Dirichlet parameters of the
// Dirichlet-Markov window emission (profile.hpp, WindowSignature) from posterior-weighted window
// k-mer counts, by Minka's fixed point for the Polya distribution (Minka T (2000) "Estimating a
// Dirichlet distribution", technical report, Microsoft Research, section on the Polya
// distribution), under concentration_below.
//
// The strand of each window is a second latent variable: given the current parameters, window i
// in state s was read forward with responsibility r_is = P_f / (P_f + P_r) (P_f, P_r its Polya
// probabilities on the two strands), so the expected complete-data log-likelihood is
//   Q = sum_s sum_i w_is [r_is ln P_f(alpha_s) + (1 - r_is) ln P_r(alpha_s)] + const,
// and ln P_f = sum_c ln Polya(n_ic | alpha_sc) separates by context. Each context is a weighted
// Polya likelihood of count vectors (the forward counts with weight w r, the reverse-complement
// counts with weight w (1 - r)), whose maximiser Minka's fixed point approaches without ever
// lowering it. A candidate that would lower Q (after clamping into the representable range, or
// under the constraint) is replaced by the current value, so every step is a generalised EM
// step (Dempster, Laird & Rubin 1977, J. R. Statist. Soc. B 39:1-38) and the likelihood never
// decreases.
#include "train_signature.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "tidemark/error.hpp"
#include "tidemark/window.hpp"

namespace tidemark::detail {
namespace {

// The range the M-step keeps: concentration (sum of a context's parameters) and mean entries.
// Above 1e8 the Polya is a multinomial to within what 5-kb windows can tell (tidemark's choice).
constexpr double min_concentration = 1e-3, max_concentration = 1e8, min_mean = 1e-9;
// Fixed-point steps per M-step (warm-started from the current value, so EM iterations continue
// where the last stopped) and the relative change that ends them early (tidemark's choices).
constexpr int max_steps = 500;
constexpr double tolerance = 1e-10;

// Stirling's series tail, log Gamma(x) - ((x - 1/2) log x - x + log(2 pi) / 2) (as window.cpp).
double stirling_tail(double x) {
    const double r = 1 / x, r2 = r * r;
    return r * (1.0 / 12 - r2 * (1.0 / 360 - r2 * (1.0 / 1260 - r2 * (1.0 / 1680 - r2 / 1188))));
}

// log Gamma(a + n) - log Gamma(a), accurate also for large a.
double log_rising(double a, double n) {
    if (n == 0) return 0;
    if (a < 10) return std::lgamma(a + n) - std::lgamma(a);
    return (a - 0.5) * std::log1p(n / a) + n * std::log(a + n) - n +
           (stirling_tail(a + n) - stirling_tail(a));
}

// A weighted count variable as the Polya likelihood needs it: G(j) = sum_i w_i [n_i > j]. Below
// `low` (the smallest count with weight) G is the total weight, so those terms are one digamma
// (or lgamma) difference; from low on, the tail is kept.
struct Tail {
    double total = 0;
    int64_t low = 0;
    std::vector<double> rest;  // G(low + x), x in [0, max - low)

    static Tail of(const std::vector<std::pair<uint32_t, double>>& data) {
        Tail t;
        int64_t low = std::numeric_limits<int64_t>::max(), high = 0;
        for (const auto& [n, w] : data) {
            if (!(w > 0)) continue;
            t.total += w;
            low = std::min<int64_t>(low, n);
            high = std::max<int64_t>(high, n);
        }
        if (!(t.total > 0)) return t;
        t.low = low;
        std::vector<double> histogram(static_cast<size_t>(high - low + 1), 0.0);
        for (const auto& [n, w] : data)
            if (w > 0) histogram[static_cast<size_t>(n - low)] += w;
        t.rest.assign(static_cast<size_t>(high - low), 0.0);
        double above = 0;
        for (int64_t x = high - low - 1; x >= 0; --x) {
            above += histogram[static_cast<size_t>(x + 1)];
            t.rest[static_cast<size_t>(x)] = above;
        }
        return t;
    }
    // sum_j G(j) / (a + j) = sum_i w_i (psi(n_i + a) - psi(a))
    double sum_inverse(double a) const {
        if (!(total > 0)) return 0;
        double s = low > 0 ? total * (digamma(a + static_cast<double>(low)) - digamma(a)) : 0.0;
        for (size_t x = 0; x < rest.size(); ++x)
            s += rest[x] / (a + static_cast<double>(low) + static_cast<double>(x));
        return s;
    }
    // sum_j G(j) ln(a + j) = sum_i w_i (ln Gamma(n_i + a) - ln Gamma(a))
    double sum_log(double a) const {
        if (!(total > 0)) return 0;
        double s = total * log_rising(a, static_cast<double>(low));
        for (size_t x = 0; x < rest.size(); ++x)
            if (rest[x] > 0) s += rest[x] * std::log(a + static_cast<double>(low + x));
        return s;
    }
};

// One state's weighted data: a tail per k-mer and per context.
struct SignatureData {
    std::vector<Tail> kmer;     // 4^k
    std::vector<Tail> context;  // 4^(k-1)
    bool empty = true;
};

using Alpha = std::array<double, 4>;

double context_q(const SignatureData& d, size_t c, const Alpha& a) {
    double q = -d.context[c].sum_log(a[0] + a[1] + a[2] + a[3]);
    for (int b = 0; b < 4; ++b) q += d.kmer[c * 4 + b].sum_log(a[b]);
    return q;
}

Alpha clamp_alpha(Alpha a) {
    double total = a[0] + a[1] + a[2] + a[3];
    if (!(total > 0) || !std::isfinite(total)) return a;
    Alpha mean{};
    double sum = 0;
    for (int b = 0; b < 4; ++b) sum += mean[b] = std::max(a[b] / total, min_mean);
    total = std::clamp(total, min_concentration, max_concentration);
    for (int b = 0; b < 4; ++b) a[b] = total * mean[b] / sum;
    return a;
}

// Minka's fixed point for the Polya distribution from the current value:
//   a_b <- a_b sum_i w_i [psi(n_ib + a_b) - psi(a_b)] / sum_i w_i [psi(n_i + A) - psi(A)].
Alpha fixed_point(const SignatureData& d, size_t c, Alpha a) {
    if (!(d.context[c].total > 0)) return a;
    for (int step = 0; step < max_steps; ++step) {
        const double den = d.context[c].sum_inverse(a[0] + a[1] + a[2] + a[3]);
        if (!(den > 0)) break;  // every weighted window lacks this context
        double change = 0;
        Alpha next{};
        for (int b = 0; b < 4; ++b) {
            next[b] = a[b] * d.kmer[c * 4 + b].sum_inverse(a[b]) / den;
            next[b] = std::max(next[b], min_mean * min_concentration);  // a base never seen
            change = std::max(change, std::abs(next[b] - a[b]) / a[b]);
        }
        a = next;
        if (change < tolerance) break;
    }
    return clamp_alpha(a);
}

Alpha with_concentration(const Alpha& a, double total) {
    const double old = a[0] + a[1] + a[2] + a[3];
    Alpha out{};
    for (int b = 0; b < 4; ++b) out[b] = a[b] / old * total;
    return out;
}

std::vector<Alpha> alphas_of(const WindowSignature& sig) {
    std::vector<Alpha> out(sig.mean.size());
    for (size_t c = 0; c < out.size(); ++c)
        for (int b = 0; b < 4; ++b) out[c][b] = sig.concentration[c] * sig.mean[c][b];
    return out;
}

void store_context(const Alpha& alpha, size_t c, WindowSignature& sig) {
    const double total = alpha[0] + alpha[1] + alpha[2] + alpha[3];
    sig.concentration[c] = total;
    for (int b = 0; b < 4; ++b) sig.mean[c][b] = alpha[b] / total;
}

// The weighted tails of state s's tie group, with the strand responsibilities of the current
// parameters.
SignatureData gather(const Profile& current, const TrainingCounts& counts,
                     const std::vector<int>& leader, size_t s) {
    const WindowSignature& sig = current.states[s].signature;
    const int k = sig.k;
    const size_t K = size_t{1} << (2 * k), C = K / 4;
    std::vector<double> alpha;
    for (const Alpha& a : alphas_of(sig)) alpha.insert(alpha.end(), a.begin(), a.end());
    std::vector<std::vector<std::pair<uint32_t, double>>> kmer(K), context(C);
    std::vector<uint32_t> reverse(K);
    SignatureData d;
    for (const WindowTally& t : counts.windows) {
        double w = 0;
        for (size_t u = 0; u < t.weight.size(); ++u)
            if (leader[u] == static_cast<int>(s)) w += t.weight[u];
        if (!(w > 0)) continue;
        if (t.kmers.size() != K) throw InternalError("M-step: window without k-mer counts");
        for (size_t code = 0; code < K; ++code)
            reverse[reverse_complement_kmer(static_cast<uint32_t>(code), k)] = t.kmers[code];
        const double f = signature_log_kernel(alpha.data(), k, t.kmers.data());
        const double r = signature_log_kernel(alpha.data(), k, reverse.data());
        const double forward = 1 / (1 + std::exp(r - f));  // P_f / (P_f + P_r)
        for (const auto& [n, weight] :
             {std::pair<const uint32_t*, double>{t.kmers.data(), w * forward},
              std::pair<const uint32_t*, double>{reverse.data(), w - w * forward}}) {
            for (size_t c = 0; c < C; ++c) {
                uint32_t total = 0;
                for (int b = 0; b < 4; ++b) {
                    kmer[c * 4 + b].emplace_back(n[c * 4 + b], weight);
                    total += n[c * 4 + b];
                }
                context[c].emplace_back(total, weight);
            }
        }
        d.empty = false;
    }
    for (const auto& v : kmer) d.kmer.push_back(Tail::of(v));
    for (const auto& v : context) d.context.push_back(Tail::of(v));
    return d;
}

}  // namespace

void maximise_signatures(const Profile& structure, const Profile& current,
                         const TrainingCounts& counts, const FreezeMask& freeze,
                         const std::vector<int>& leader, Profile& out) {
    const size_t P = structure.states.size();
    if (P == 0 || !structure.states.front().signature.present()) return;
    std::vector<SignatureData> data(P);
    std::vector<std::vector<Alpha>> now(P), fitted(P);
    for (size_t s = 0; s < P; ++s) {
        now[s] = fitted[s] = alphas_of(current.states[s].signature);
        if (leader[s] != static_cast<int>(s) || freeze.emissions[s]) continue;
        data[s] = gather(current, counts, leader, s);
        if (data[s].empty) continue;
        for (size_t c = 0; c < fitted[s].size(); ++c) {
            const Alpha next = fixed_point(data[s], c, now[s][c]);
            if (context_q(data[s], c, next) >= context_q(data[s], c, now[s][c]))
                fitted[s][c] = next;
        }
    }
    // concentration_below, context by context: when a state's own optimum is more concentrated
    // than its reference's, the candidates are the current values (feasible) and the block of
    // violators and reference sharing one concentration (each with its own fitted mean), the
    // concentration maximising their summed Q; the feasible candidate of largest Q wins.
    for (size_t r = 0; r < P; ++r) {
        std::vector<size_t> below;
        for (size_t s = 0; s < P; ++s)
            if (structure.states[s].signature.concentration_reference == structure.states[r].name &&
                !structure.states[r].name.empty())
                below.push_back(s);
        if (below.empty()) continue;
        const auto total = [](const Alpha& a) { return a[0] + a[1] + a[2] + a[3]; };
        const auto q_of = [&](size_t s, size_t c, const Alpha& a) {
            return data[s].empty || data[s].kmer.empty() ? 0.0 : context_q(data[s], c, a);
        };
        for (size_t c = 0; c < fitted[r].size(); ++c) {
            const auto feasible = [&](const std::vector<Alpha>& x) {  // x[0]: reference
                for (size_t m = 1; m < x.size(); ++m)
                    if (total(x[m]) > total(x[0])) return false;
                return true;
            };
            const auto block_q = [&](const std::vector<Alpha>& x) {
                double q = q_of(r, c, x[0]);
                for (size_t m = 0; m < below.size(); ++m) q += q_of(below[m], c, x[m + 1]);
                return q;
            };
            std::vector<Alpha> own{fitted[r][c]}, cur{now[r][c]};
            for (size_t s : below) {
                own.push_back(fitted[s][c]);
                cur.push_back(now[s][c]);
            }
            if (feasible(own)) continue;
            std::vector<Alpha> best = cur;
            double best_q = block_q(cur);
            // The block: the reference and its violators at one concentration (a frozen member
            // fixes it at its own).
            std::vector<size_t> block{0};
            for (size_t m = 1; m < own.size(); ++m)
                if (total(own[m]) > total(own[0])) block.push_back(m);
            const auto frozen = [&](size_t m) {
                return freeze.emissions[m == 0 ? r : below[m - 1]] ||
                       data[m == 0 ? r : below[m - 1]].empty;
            };
            std::vector<Alpha> tied = own;
            const auto set_all = [&](double conc) {
                for (size_t m : block)
                    if (!frozen(m)) tied[m] = with_concentration(own[m], conc);
            };
            double fixed = -1;
            for (size_t m : block)
                if (frozen(m)) fixed = total(own[m]);
            if (fixed > 0) {
                set_all(fixed);
            } else {
                const double u = golden_max(
                    [&](double x) {
                        set_all(std::exp(x));
                        return block_q(tied);
                    },
                    std::log(min_concentration), std::log(max_concentration), 1e-9);
                set_all(std::exp(u));
            }
            if (feasible(tied) && block_q(tied) > best_q) best = tied;
            fitted[r][c] = best[0];
            for (size_t m = 0; m < below.size(); ++m) fitted[below[m]][c] = best[m + 1];
        }
    }
    for (size_t s = 0; s < P; ++s) {
        const size_t l = static_cast<size_t>(leader[s]);
        for (size_t c = 0; c < fitted[l].size(); ++c)
            if (fitted[l][c] != now[l][c]) store_context(fitted[l][c], c, out.states[s].signature);
    }
}

}  // namespace tidemark::detail
