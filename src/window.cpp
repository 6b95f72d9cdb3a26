// Window-level emissions (beta-binomial G+C counts) and the window-to-base adapter.
#include "tidemark/window.hpp"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <limits>

#include "tidemark/call.hpp"
#include "tidemark/error.hpp"

namespace tidemark {
namespace {

// Bases handed to the base-level sink per block. 8 Ki keeps the block of region posteriors in
// the L2 cache while every sink reads it (30 % less CPU than 64 Ki for isochore on chrX), and
// bounds the adapter's buffers whatever the window size.
constexpr int64_t expand_block = int64_t{1} << 13;

double log_choose(int64_t n, int64_t k) {
    return std::lgamma(static_cast<double>(n) + 1) - std::lgamma(static_cast<double>(k) + 1) -
           std::lgamma(static_cast<double>(n - k) + 1);
}

// Below this alpha or beta the kernel is taken from lgamma directly; from it on, from Stirling's
// series, where the lgamma form loses digits (tidemark's choice of switch point: the series
// terms left out in stirling_tail are below 2e-14 there).
constexpr double stirling_from = 10;

// log Gamma(x) - ((x - 1/2) log x - x + log(2 pi) / 2) = 1/(12x) - 1/(360x^3) + 1/(1260x^5)
// - 1/(1680x^7) + 1/(1188x^9) - ... (Stirling's series; Abramowitz & Stegun 1964, Handbook of
// Mathematical Functions, 6.1.41, from memory).
double stirling_tail(double x) {
    const double r = 1 / x, r2 = r * r;
    return r * (1.0 / 12 - r2 * (1.0 / 360 - r2 * (1.0 / 1260 - r2 * (1.0 / 1680 - r2 / 1188))));
}

// log B(k + a, n - k + b) - log B(a, b) for a, b >= stirling_from. As lgamma differences this is
// a sum of terms near n log(a + b) that cancel to a few nats: with the small dispersions a fit
// can reach (a + b = 1/rho - 1 of 1e6 and more) that loses 1e-9 to 1e-3 nats per window. Here
// each log Gamma(x + j) - log Gamma(x) is (x - 1/2) log1p(j/x) + j log(x + j) - j + tail terms;
// the -j parts cancel and the j log(x + j) parts combine into logs of ratios near the window's
// GC fraction, so no term is much larger than the result.
double large_kernel(double a, double b, double k, double n) {
    const double m = n - k, total = a + b;
    double v = (a - 0.5) * std::log1p(k / a) + (b - 0.5) * std::log1p(m / b) -
               (total - 0.5) * std::log1p(n / total);
    if (k > 0) v += k * std::log((a + k) / (total + n));
    if (m > 0) v += m * std::log((b + m) / (total + n));
    return v + (stirling_tail(a + k) - stirling_tail(a)) +
           (stirling_tail(b + m) - stirling_tail(b)) -
           (stirling_tail(total + n) - stirling_tail(total));
}

// One context of the signature: log of prod_b Gamma(a_b + n_b) / Gamma(a_b) times
// Gamma(A) / Gamma(A + n). For large parameters (a high concentration) the lgamma differences
// cancel to a few nats out of terms near n log A, so, as in large_kernel, each difference is
// taken from Stirling's series with the j log(x + j) parts combined into logs of ratios.
double polya_context(const double* a, const uint32_t* n) {
    double total_a = 0, total_n = 0;
    bool large = true;
    for (int b = 0; b < 4; ++b) {
        total_a += a[b];
        total_n += n[b];
        large = large && a[b] >= stirling_from;
    }
    if (total_n == 0) return 0;
    if (!large) {
        double v = std::lgamma(total_a) - std::lgamma(total_a + total_n);
        for (int b = 0; b < 4; ++b)
            if (n[b] > 0) v += std::lgamma(a[b] + n[b]) - std::lgamma(a[b]);
        return v;
    }
    double v = -(total_a - 0.5) * std::log1p(total_n / total_a) -
               (stirling_tail(total_a + total_n) - stirling_tail(total_a));
    for (int b = 0; b < 4; ++b) {
        if (n[b] == 0) continue;
        const double x = n[b];
        v += (a[b] - 0.5) * std::log1p(x / a[b]) + x * std::log((a[b] + x) / (total_a + total_n)) +
             (stirling_tail(a[b] + x) - stirling_tail(a[b]));
    }
    return v;
}

}  // namespace

void count_kmers(const uint8_t* bases, int64_t n, int k, uint32_t* counts) {
    const uint32_t mask = (1u << (2 * k)) - 1;
    uint32_t code = 0;
    int run = 0;
    for (int64_t i = 0; i < n; ++i) {
        if (bases[i] == base_unknown) {
            run = 0;
            code = 0;
            continue;
        }
        code = ((code << 2) | bases[i]) & mask;
        if (++run >= k) ++counts[code];
    }
}

uint32_t reverse_complement_kmer(uint32_t code, int k) {
    uint32_t out = 0;
    for (int i = 0; i < k; ++i) {
        out = (out << 2) | (3 - (code & 3));
        code >>= 2;
    }
    return out;
}

double signature_log_kernel(const double* alpha, int k, const uint32_t* counts) {
    const size_t contexts = size_t{1} << (2 * (k - 1));
    double v = 0;
    for (size_t c = 0; c < contexts; ++c) v += polya_context(alpha + c * 4, counts + c * 4);
    return v;
}

double signature_log_probability(const Model& m, int s, const WindowCount& w) {
    const int k = m.signature_k;
    const size_t kmers = size_t{1} << (2 * k);
    const double* alpha = m.sig_alpha.data() + static_cast<size_t>(s) * kmers;
    std::vector<uint32_t> reverse(kmers);
    int64_t chained = 0;
    for (size_t code = 0; code < kmers; ++code) {
        reverse[reverse_complement_kmer(static_cast<uint32_t>(code), k)] = w.kmers[code];
        chained += w.kmers[code];
    }
    const double forward = signature_log_kernel(alpha, k, w.kmers.data());
    const double backward = signature_log_kernel(alpha, k, reverse.data());
    const double top = std::max(forward, backward);
    // ln((e^f + e^r) / 2), written so that neither exponential underflows to 0 alone.
    const double strands =
        top + std::log1p(std::exp(std::min(forward, backward) - top)) - std::log(2.0);
    return strands - static_cast<double>(w.known - chained) * std::log(4.0);
}

WindowCount window_count(const Model& m, const Contig& contig, int64_t pos) {
    const int64_t begin = pos * m.window;
    const int64_t end = std::min(contig.length, begin + m.window);
    const Composition c = composition(contig, begin, end);
    WindowCount w{c.c + c.g, c.known(), {}};
    if (m.signature_k > 0) {
        w.kmers.assign(size_t{1} << (2 * m.signature_k), 0);
        std::vector<uint8_t> bases(static_cast<size_t>(end - begin));
        contig.unpack(begin, end - begin, bases.data());
        count_kmers(bases.data(), end - begin, m.signature_k, w.kmers.data());
    }
    return w;
}

double beta_binomial_log_kernel(double a, double b, int64_t k, int64_t n) {
    if (a >= stirling_from && b >= stirling_from)
        return large_kernel(a, b, static_cast<double>(k), static_cast<double>(n));
    return std::lgamma(static_cast<double>(k) + a) + std::lgamma(static_cast<double>(n - k) + b) -
           std::lgamma(static_cast<double>(n) + a + b) -
           (std::lgamma(a) + std::lgamma(b) - std::lgamma(a + b));
}

double window_log_probability(const Model& m, int s, int64_t k, int64_t n) {
    if (n == 0) return 0;
    const double a = m.gc_alpha[s], b = m.gc_beta[s];
    // log B(k + a, n - k + b) - log B(a, b), the beta-binomial's kernel.
    const double kernel = a >= stirling_from && b >= stirling_from
                              ? large_kernel(a, b, static_cast<double>(k), static_cast<double>(n))
                              : std::lgamma(static_cast<double>(k) + a) +
                                    std::lgamma(static_cast<double>(n - k) + b) -
                                    std::lgamma(static_cast<double>(n) + a + b) - m.gc_lbeta[s];
    return log_choose(n, k) + kernel;
}

void fill_window_log_emissions(const Model& m, const Contig& contig, int64_t first, int64_t count,
                               uint8_t* known, double* log_emission) {
    const int S = m.states;
    for (int64_t t = 0; t < count; ++t) {
        const WindowCount w = window_count(m, contig, first + t);
        double* row = log_emission + t * S;
        const bool evidence = window_has_evidence(m, w);
        known[t] = evidence ? 0 : base_unknown;
        // Chain copies share their profile state's distribution: compute each distinct one once.
        for (int s = 0; s < S; ++s) {
            if (!evidence) {
                row[s] = 0.0;
            } else if (s > 0 && m.profile_state[s] == m.profile_state[s - 1]) {
                row[s] = row[s - 1];
            } else {
                row[s] = (m.window_gc ? window_log_probability(m, s, w.gc, w.known) : 0.0) +
                         (m.signature_k > 0 ? signature_log_probability(m, s, w) : 0.0);
            }
        }
    }
}

double fill_window_emissions(const Model& m, const Contig& contig, int64_t first, int64_t count,
                             uint8_t* known, double* emission) {
    const int S = m.states;
    fill_window_log_emissions(m, contig, first, count, known, emission);
    double removed = 0;
    for (int64_t t = 0; t < count; ++t) {
        double* row = emission + t * S;
        const double top = *std::max_element(row, row + S);
        for (int s = 0; s < S; ++s) row[s] = std::exp(row[s] - top);
        removed += top;
    }
    return removed;
}

DinucleotideCounts& DinucleotideCounts::operator+=(const DinucleotideCounts& o) {
    for (size_t i = 0; i < bases.size(); ++i) bases[i] += o.bases[i];
    for (size_t i = 0; i < pairs.size(); ++i) pairs[i] += o.pairs[i];
    return *this;
}

DinucleotideCounts dinucleotide_counts(const Contig& contig, int64_t begin, int64_t end) {
    DinucleotideCounts out;
    std::vector<uint8_t> bases(static_cast<size_t>(std::min<int64_t>(end - begin, expand_block)));
    uint8_t previous = base_unknown;
    for (int64_t from = begin; from < end;) {
        const int64_t n = std::min(end - from, expand_block);
        contig.unpack(from, n, bases.data());
        for (int64_t i = 0; i < n; ++i) {
            const uint8_t b = bases[static_cast<size_t>(i)];
            if (b < 4) {
                ++out.bases[b];
                if (previous < 4) ++out.pairs[previous * 4 + b];
            }
            previous = b;
        }
        from += n;
    }
    return out;
}

namespace {

// rho*_XY of a stretch and its reverse complement together (signature_distance); false when
// undefined.
bool relative_abundance(const DinucleotideCounts& c, std::array<double, 16>& rho) {
    int64_t known = 0, pairs = 0;
    for (const int64_t n : c.bases) known += n;
    for (const int64_t n : c.pairs) pairs += n;
    if (pairs == 0) return false;
    std::array<double, 4> f{};
    for (int x = 0; x < 4; ++x)
        f[x] =
            static_cast<double>(c.bases[x] + c.bases[3 - x]) / (2.0 * static_cast<double>(known));
    for (int x = 0; x < 4; ++x) {
        if (f[x] == 0) return false;
        for (int y = 0; y < 4; ++y) {
            const int64_t both = c.pairs[x * 4 + y] + c.pairs[(3 - y) * 4 + (3 - x)];
            rho[x * 4 + y] =
                static_cast<double>(both) / (2.0 * static_cast<double>(pairs)) / (f[x] * f[y]);
        }
    }
    return true;
}

}  // namespace

double signature_distance(const DinucleotideCounts& a, const DinucleotideCounts& b) {
    std::array<double, 16> ra{}, rb{};
    if (!relative_abundance(a, ra) || !relative_abundance(b, rb))
        return std::numeric_limits<double>::quiet_NaN();
    double sum = 0;
    for (size_t i = 0; i < 16; ++i) sum += std::abs(ra[i] - rb[i]);
    return sum / 16;
}

ClassBaseScores::ClassBaseScores(const Model& m)
    : window_(m.window),
      regions_(static_cast<int>(m.region_names.size())),
      k_(m.signature_k),
      gc_(m.window_gc) {
    if (m.window <= 0 || m.gc_alpha.size() != static_cast<size_t>(m.states))
        throw InternalError("ClassBaseScores needs a window model");
    log_base_.assign(static_cast<size_t>(regions_) * 4, 0.0);
    members_.resize(static_cast<size_t>(regions_));
    if (k_ > 0) {
        const size_t kmers = size_t{1} << (2 * k_);
        for (int s = 0; s < m.states; ++s) {
            if (s > 0 && m.profile_state[s] == m.profile_state[s - 1]) continue;  // chain copies
            Member member{m.gc_alpha[s], m.gc_beta[s], {}, {}};
            const double* a = m.sig_alpha.data() + static_cast<size_t>(s) * kmers;
            member.alpha.assign(a, a + kmers);
            for (size_t c = 0; c < kmers / 4; ++c)
                member.context_total.push_back(a[c * 4] + a[c * 4 + 1] + a[c * 4 + 2] +
                                               a[c * 4 + 3]);
            members_[static_cast<size_t>(m.region_of_state[s])].push_back(std::move(member));
        }
    }
    for (int r = 0; r < regions_; ++r) {
        // Mean of the GC means of the region's distinct profile states (chain copies of one
        // profile state count once).
        double sum = 0;
        int count = 0;
        for (int s = 0; s < m.states; ++s) {
            if (m.region_of_state[s] != r ||
                (s > 0 && m.profile_state[s] == m.profile_state[s - 1]))
                continue;
            sum += m.gc_alpha[s] / (m.gc_alpha[s] + m.gc_beta[s]);
            ++count;
        }
        if (count == 0) continue;  // a region without states is never a neighbour
        const double gc = sum / count;
        double* row = log_base_.data() + static_cast<size_t>(r) * 4;
        row[0] = row[3] = std::log((1 - gc) / 2);  // A, T
        row[1] = row[2] = std::log(gc / 2);        // C, G
    }
}

void ClassBaseScores::difference(const Contig& contig, int64_t begin, int64_t end, int left,
                                 int right, double* out) const {
    const int64_t n = end - begin;
    std::vector<uint8_t> bases(static_cast<size_t>(n));
    contig.unpack(begin, n, bases.data());
    double by_base[5];
    for (uint8_t b = 0; b < 4; ++b) by_base[b] = score(left, b) - score(right, b);
    by_base[4] = 0;
    for (int64_t i = 0; i < n; ++i) {
        const uint8_t b = bases[static_cast<size_t>(i)];
        out[i] = by_base[b < 4 ? b : 4];
    }
}

void ClassBaseScores::split_scores(const Contig& contig, int64_t begin, int64_t end, int left,
                                   int right, double* out, int64_t left_from,
                                   int64_t right_to) const {
    if (k_ == 0) throw InternalError("ClassBaseScores::split_scores needs a signature");
    if (members_[static_cast<size_t>(left)].empty() || members_[static_cast<size_t>(right)].empty())
        throw InternalError("ClassBaseScores::split_scores: a region without states");
    if (left_from < 0) left_from = begin;
    if (right_to < 0) right_to = end;
    const int64_t n = end - begin, span = right_to - left_from, off = begin - left_from;
    std::vector<uint8_t> bases(static_cast<size_t>(span));
    contig.unpack(left_from, span, bases.data());
    // The k-mer ending at each base (-1: fewer than k - 1 known bases before it, or unknown).
    std::vector<int32_t> kmer(static_cast<size_t>(span), -1);
    const int order = k_ - 1;
    RollingContext context = context_before(contig, left_from, order);
    for (int64_t i = 0; i < span; ++i) {
        const uint8_t b = bases[static_cast<size_t>(i)];
        if (b < 4 && context.complete(order))
            kmer[static_cast<size_t>(i)] = static_cast<int32_t>((context.row(order) << 2) | b);
        context.push(b);
    }
    const size_t kmers = size_t{1} << (2 * k_);
    std::vector<uint32_t> reverse(kmers);
    for (uint32_t code = 0; code < kmers; ++code) reverse[code] = reverse_complement_kmer(code, k_);

    // One side's log-likelihood as it grows base by base from `from` in direction `step`
    // (the Polya probability is exchangeable: the order of adding does not change it);
    // record(stretch end or start, value) after every base and before the first.
    const auto sweep = [&](int region, int64_t from, int64_t to, int64_t step, auto record) {
        const std::vector<Member>& states = members_[static_cast<size_t>(region)];
        const size_t S = states.size();
        std::vector<double> forward(S, 0.0), backward(S, 0.0), gc_part(S, 0.0);
        std::vector<double> state_total(S, 0.0);
        std::vector<uint32_t> count(kmers, 0), context_count(kmers / 4, 0);
        std::vector<uint32_t> rc_count(kmers, 0), rc_context_count(kmers / 4, 0);
        int64_t gc = 0, at = 0;
        record(from, 0.0);
        for (int64_t filled = from; filled != to;) {
            const int64_t i = step > 0 ? filled : filled - 1;  // the base added at this step
            const uint8_t b = bases[static_cast<size_t>(i)];
            const int32_t code = kmer[static_cast<size_t>(i)];
            for (size_t s = 0; s < S; ++s) {
                const Member& st = states[s];
                if (b < 4 && gc_) {
                    const bool strong = b == 1 || b == 2;
                    gc_part[s] +=
                        std::log((strong ? st.gc_alpha + static_cast<double>(gc)
                                         : st.gc_beta + static_cast<double>(at)) /
                                 (st.gc_alpha + st.gc_beta + static_cast<double>(gc + at)));
                }
                if (code >= 0) {
                    const uint32_t c = static_cast<uint32_t>(code), r = reverse[c];
                    forward[s] += std::log((st.alpha[c] + count[c]) /
                                           (st.context_total[c >> 2] + context_count[c >> 2]));
                    backward[s] += std::log((st.alpha[r] + rc_count[r]) /
                                            (st.context_total[r >> 2] + rc_context_count[r >> 2]));
                }
                // ln((e^f + e^r) / 2): the strand is a fair coin for the whole stretch.
                const double top = std::max(forward[s], backward[s]);
                state_total[s] = top +
                                 std::log1p(std::exp(std::min(forward[s], backward[s]) - top)) -
                                 std::log(2.0) + gc_part[s];
            }
            if (b < 4) (b == 1 || b == 2 ? gc : at) += 1;
            if (code >= 0) {
                const uint32_t c = static_cast<uint32_t>(code), r = reverse[c];
                ++count[c];
                ++context_count[c >> 2];
                ++rc_count[r];
                ++rc_context_count[r >> 2];
            }
            // The region: the equal mixture of its states, ln(mean_s e^total_s).
            const double top = *std::max_element(state_total.begin(), state_total.end());
            double sum = 0;
            for (size_t s = 0; s < S; ++s) sum += std::exp(state_total[s] - top);
            filled += step;
            record(filled, top + std::log(sum / static_cast<double>(S)));
        }
    };
    sweep(left, 0, off + n, 1, [&](int64_t filled, double v) {
        if (filled >= off) out[filled - off] = v;
    });
    std::vector<double> side(static_cast<size_t>(n + 1));
    sweep(right, span, off, -1, [&](int64_t filled, double v) {
        if (filled <= off + n) side[static_cast<size_t>(filled - off)] = v;
    });
    for (int64_t k = 0; k <= n; ++k) out[k] += side[static_cast<size_t>(k)];
}

// move_margin (35 nats): the grid end is where the window posteriors put the call; a split
// moves it only on strong evidence. The two stretches' log-likelihoods sum over thousands of
// k-mers, so splits a few kb apart differ by tens of nats without a change of class: on the
// training data (provenance of the composition-shift template: E. coli K-12 against 536, 536
// against K-12 and DH1, K-12 with 8 GC-matched V. cholerae O395 segments), the splits inside a
// call that cut comparative islands below half covered beat the best split outside it by 22-23
// nats, so a conventional level of a few nats (a likelihood ratio of 100 is 4.6) does not tell
// them from a change. Measured (islands >= 50 % covered, share of the core called; inserts, host
// share, median boundary error): the plain maximum 11/21 and 7.8 %, 13/32 and 4.0 %, 8/8, 11.1 %
// and 86 bp; margins of 25 / 30 / 35 / 40 / 50: K-12 13 / 13 / 13 / 13 / 13 of 21 (7.9 / 7.6 /
// 7.8 / 7.8 / 8.0 %), 536 15 / 15 / 16 / 16 / 16 of 32 (3.8 / 3.8 / 3.8 / 3.7 / 4.0 %), inserts 8/8
// (224 / 287 / 387 / 485 / 485 bp); on the grid 13/21 and 8.2 %, 16/32 and 4.0 %, 976 bp.
// 35 is the smallest multiple of 5 that keeps every island the grid found on both genomes.
int64_t ClassBaseScores::change_point(const Contig& contig, int64_t begin, int64_t end, int left,
                                      int right, int64_t prefer, int64_t left_from,
                                      int64_t right_to, CallSide call) const {
    const int64_t n = end - begin;
    if (k_ == 0) {
        std::vector<double> diff(static_cast<size_t>(n));
        difference(contig, begin, end, left, right, diff.data());
        return best_change_point(diff.data(), n, prefer);
    }
    if (members_[static_cast<size_t>(left)].empty() || members_[static_cast<size_t>(right)].empty())
        return prefer;  // a region without states has no score: the end stays
    std::vector<double> total(static_cast<size_t>(n + 1));
    split_scores(contig, begin, end, left, right, total.data(), left_from, right_to);
    // The best split among [from, to] (among equals, the nearest to prefer, then the smaller).
    const auto best_in = [&](int64_t from, int64_t to) {
        int64_t at = from;
        for (int64_t k = from + 1; k <= to; ++k) {
            const double v = total[static_cast<size_t>(k)], best = total[static_cast<size_t>(at)];
            if (v > best || (v == best && std::llabs(k - prefer) < std::llabs(at - prefer))) at = k;
        }
        return at;
    };
    if (call == CallSide::both || prefer < 0 || prefer > n) return best_in(0, n);
    const auto beats = [&](int64_t a, int64_t b) {
        return total[static_cast<size_t>(a)] > total[static_cast<size_t>(b)] + move_margin;
    };
    const bool call_left = call == CallSide::left;
    int64_t kept = call_left ? best_in(prefer, n) : best_in(0, prefer);  // not shortening it
    if (!beats(kept, prefer)) kept = prefer;
    if (call_left ? prefer == 0 : prefer == n) return kept;  // nothing of the call in range
    const int64_t shorter = call_left ? best_in(0, prefer - 1) : best_in(prefer + 1, n);
    return beats(shorter, kept) ? shorter : kept;
}

Model region_view(const Model& m) {
    Model v;
    const int R = static_cast<int>(m.region_names.size());
    v.states = R;
    v.name = m.name;
    v.region_names = m.region_names;
    v.region_report = m.region_report;
    v.region_colors = m.region_colors;
    v.viewed_window = m.window;  // the evidence rule, for contig screening (summary.hpp)
    v.window_min_known = m.window_min_known;
    for (int r = 0; r < R; ++r) {
        v.state_names.push_back(m.region_names[r]);
        v.region_of_state.push_back(r);
        v.order_of_state.push_back(0);
        v.profile_state.push_back(r);
        v.chain_copy.push_back(1);
        v.chain_length.push_back(1);
    }
    if (m.refine_ends) v.class_base_scores = std::make_shared<const ClassBaseScores>(m);
    v.signature_evidence = m.signature_k > 0;
    v.contig_screen = m.contig_screen;
    return v;
}

WindowExpander::WindowExpander(const Model& window_model, DecodeSink& base_sink)
    : model_(window_model), sink_(base_sink) {
    if (window_model.window <= 0) throw InternalError("WindowExpander needs a window model");
}

void WindowExpander::begin_contig(const Contig& contig) {
    contig_ = &contig;
    sink_.begin_contig(contig);
}

void WindowExpander::block(const BlockView& view) {
    if (!contig_) throw InternalError("WindowExpander: block before begin_contig");
    const int S = view.states;
    const int R = static_cast<int>(model_.region_names.size());
    const int64_t w = model_.window;
    const int64_t first_base = view.begin * w;
    const int64_t end_base = std::min(contig_->length, (view.begin + view.size) * w);
    std::vector<double> region(R);
    for (int64_t start = first_base; start < end_base; start += expand_block) {
        const int64_t n = std::min(expand_block, end_base - start);
        bases_.resize(n);
        posterior_.resize(static_cast<size_t>(n) * R);
        contig_->unpack(start, n, bases_.data());
        int64_t t = 0;
        while (t < n) {
            const int64_t pos = (start + t) / w;  // the window of base start + t
            const double* p = view.posterior + (pos - view.begin) * S;
            std::fill(region.begin(), region.end(), 0.0);
            for (int s = 0; s < S; ++s) region[model_.region_of_state[s]] += p[s];
            const int64_t run_end = std::min(n, (pos + 1) * w - start);
            for (; t < run_end; ++t)
                std::copy(region.begin(), region.end(), posterior_.begin() + t * R);
        }
        BlockView out;
        out.begin = start;
        out.size = n;
        out.states = R;
        out.bases = bases_.data();
        out.posterior = posterior_.data();
        sink_.block(out);
    }
}

void WindowExpander::end_contig(const Contig& contig, const DecodeResult& result) {
    sink_.end_contig(contig, result);
    contig_ = nullptr;
}

std::unique_ptr<DecodeSink> WindowExpander::fork() const {
    auto inner = sink_.fork();
    if (!inner) return nullptr;
    auto out = std::make_unique<WindowExpander>(model_, *inner);
    out->owned_ = std::move(inner);
    return out;
}

void WindowExpander::join(DecodeSink& later) {
    auto* other = dynamic_cast<WindowExpander*>(&later);
    if (!other) throw InternalError("WindowExpander::join: not a fork of this adapter");
    sink_.join(other->sink_);
}

}  // namespace tidemark
