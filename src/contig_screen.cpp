#include "tidemark/contig_screen.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <vector>

#include "median.hpp"
#include "tidemark/train.hpp"

namespace tidemark {

namespace {

constexpr int reverse_complement(int code) {  // of trinucleotide 16x + 4y + z
    return 16 * (3 - code % 4) + 4 * (3 - code / 4 % 4) + (3 - code / 16);
}

// The 32 codes kept: those not above their reverse complement's, increasing.
constexpr std::array<int, screen_dimensions> kept_codes() {
    std::array<int, screen_dimensions> out{};
    int n = 0;
    for (int k = 0; k < 64; ++k)
        if (k < reverse_complement(k)) out[static_cast<size_t>(n++)] = k;
    return out;
}
constexpr std::array<int, screen_dimensions> kept = kept_codes();

using Signature = std::array<double, screen_dimensions>;

double mahalanobis(const std::vector<double>& center, const std::vector<double>& precision,
                   const Signature& x) {
    constexpr size_t n = screen_dimensions;
    Signature d{};
    for (size_t i = 0; i < n; ++i) d[i] = x[i] - center[i];
    double sum = 0;
    for (size_t i = 0; i < n; ++i) {
        double row = 0;
        for (size_t k = 0; k < n; ++k) row += precision[i * n + k] * d[k];
        sum += d[i] * row;
    }
    return sum;
}

// Inverse of a symmetric positive-definite matrix by Cholesky factorisation; false when it is
// not positive definite (the stretches' spread is degenerate).
bool invert_spd(std::vector<double> a, size_t n, std::vector<double>& inverse) {
    for (size_t j = 0; j < n; ++j) {  // a = L L^T, L in the lower triangle
        double d = a[j * n + j];
        for (size_t k = 0; k < j; ++k) d -= a[j * n + k] * a[j * n + k];
        if (!(d > 0)) return false;
        a[j * n + j] = std::sqrt(d);
        for (size_t i = j + 1; i < n; ++i) {
            double s = a[i * n + j];
            for (size_t k = 0; k < j; ++k) s -= a[i * n + k] * a[j * n + k];
            a[i * n + j] = s / a[j * n + j];
        }
    }
    inverse.assign(n * n, 0.0);
    std::vector<double> col(n);
    for (size_t c = 0; c < n; ++c) {  // solve L L^T x = e_c
        for (size_t i = 0; i < n; ++i) {
            double s = i == c ? 1.0 : 0.0;
            for (size_t k = 0; k < i; ++k) s -= a[i * n + k] * col[k];
            col[i] = s / a[i * n + i];
        }
        for (size_t i = n; i-- > 0;) {
            double s = col[i];
            for (size_t k = i + 1; k < n; ++k) s -= a[k * n + i] * col[k];
            col[i] = s / a[i * n + i];
        }
        for (size_t i = 0; i < n; ++i) inverse[i * n + c] = col[i];
    }
    return true;
}

// The signatures of the stretches [a, a + length) of a contig, a = 0, length, 2 length, ...
// that fit in it and have at least half their bases known.
void add_stretches(const Contig& contig, int64_t length, std::vector<Signature>& out) {
    for (int64_t a = 0; a + length <= contig.length; a += length) {
        const TrinucleotideCounts c = trinucleotide_counts(contig, a, a + length);
        if (2 * c.known >= length) out.push_back(trinucleotide_signature(c));
    }
}

}  // namespace

TrinucleotideCounts trinucleotide_counts(const Contig& contig, int64_t begin, int64_t end) {
    TrinucleotideCounts out;
    std::array<int64_t, 64> forward{};
    std::vector<uint8_t> codes;
    int prev2 = 4, prev1 = 4;  // codes of the two bases before the one read (4: none)
    constexpr int64_t chunk = int64_t{1} << 16;
    for (int64_t at = begin; at < end; at += chunk) {
        const int64_t n = std::min(chunk, end - at);
        codes.resize(static_cast<size_t>(n));
        contig.unpack(at, n, codes.data());
        for (const uint8_t b : codes) {
            if (b < 4) {
                ++out.known;
                if (prev2 < 4 && prev1 < 4)
                    ++forward[static_cast<size_t>(16 * prev2 + 4 * prev1 + b)];
            }
            prev2 = prev1;
            prev1 = b;
        }
    }
    for (int k = 0; k < 64; ++k)
        out.n[static_cast<size_t>(k)] =
            forward[static_cast<size_t>(k)] + forward[static_cast<size_t>(reverse_complement(k))];
    return out;
}

Signature trinucleotide_signature(const TrinucleotideCounts& counts) {
    double total = 0;
    for (const int64_t x : counts.n) total += static_cast<double>(x);
    std::array<double, 64> f{};
    if (total > 0)
        for (size_t k = 0; k < 64; ++k) f[k] = static_cast<double>(counts.n[k]) / total;
    std::array<double, 16> left{}, right{};  // f(xy.), f(.yz)
    std::array<double, 4> middle{};          // f(.y.)
    for (int k = 0; k < 64; ++k) {
        const double x = f[static_cast<size_t>(k)];
        left[static_cast<size_t>(k / 4)] += x;
        right[static_cast<size_t>(k % 16)] += x;
        middle[static_cast<size_t>(k / 4 % 4)] += x;
    }
    Signature out{};
    for (size_t i = 0; i < kept.size(); ++i) {
        const int k = kept[i];
        const double num =
            std::max(f[static_cast<size_t>(k)], 1e-9) * middle[static_cast<size_t>(k / 4 % 4)];
        const double den =
            std::max(left[static_cast<size_t>(k / 4)] * right[static_cast<size_t>(k % 16)], 1e-12);
        out[i] = std::log(num / den);
    }
    return out;
}

double screen_distance(const ContigScreen& screen, const TrinucleotideCounts& counts) {
    return mahalanobis(screen.center, screen.precision, trinucleotide_signature(counts));
}

double screen_limit(const ContigScreen& screen, int64_t known) {
    if (known < ContigScreenRule::min_known || screen.lengths.empty())
        return std::numeric_limits<double>::quiet_NaN();
    const auto& L = screen.lengths;
    if (known <= L.front()) return screen.limits.front();
    if (known >= L.back()) return screen.limits.back();
    size_t i = 1;
    while (L[i] < known) ++i;
    const double x0 = std::log(static_cast<double>(L[i - 1])),
                 x1 = std::log(static_cast<double>(L[i]));
    const double y0 = std::log(screen.limits[i - 1]), y1 = std::log(screen.limits[i]);
    const double x = std::log(static_cast<double>(known));
    return std::exp(y0 + (x - x0) / (x1 - x0) * (y1 - y0));
}

ContigScreen fit_contig_screen(TrainingData& data) {
    using R = ContigScreenRule;
    constexpr size_t n = screen_dimensions;
    std::vector<std::vector<Signature>> stretches(R::lengths.size());
    data.for_each([&](const Contig& contig) {
        for (size_t i = 0; i < R::lengths.size(); ++i)
            add_stretches(contig, R::lengths[i], stretches[i]);
    });
    const std::vector<Signature>& base = stretches[0];
    ContigScreen screen;
    if (static_cast<int64_t>(base.size()) < R::min_stretches) return screen;
    std::vector<bool> keep(base.size(), true);
    std::vector<double> center(n), precision, distance(base.size());
    for (int round = 0; round < R::rounds; ++round) {
        size_t kept_count = 0;
        std::fill(center.begin(), center.end(), 0.0);
        for (size_t s = 0; s < base.size(); ++s)
            if (keep[s]) {
                ++kept_count;
                for (size_t i = 0; i < n; ++i) center[i] += base[s][i];
            }
        if (kept_count < 2) return screen;
        for (double& c : center) c /= static_cast<double>(kept_count);
        std::vector<double> cov(n * n, 0.0);
        for (size_t s = 0; s < base.size(); ++s)
            if (keep[s])
                for (size_t i = 0; i < n; ++i)
                    for (size_t k = 0; k <= i; ++k)
                        cov[i * n + k] += (base[s][i] - center[i]) * (base[s][k] - center[k]);
        for (size_t i = 0; i < n; ++i)
            for (size_t k = 0; k <= i; ++k)
                cov[k * n + i] = cov[i * n + k] /= static_cast<double>(kept_count - 1);
        if (!invert_spd(cov, n, precision)) return ContigScreen{};
        for (size_t s = 0; s < base.size(); ++s)
            distance[s] = mahalanobis(center, precision, base[s]);
        std::vector<double> sorted = distance;  // distance keeps the stretches' order
        const double cut = R::chi2_32_q975 * detail::median_in_place(sorted) / R::chi2_32_median;
        for (size_t s = 0; s < base.size(); ++s) keep[s] = distance[s] <= cut;
    }
    screen.center = center;
    screen.precision = precision;
    for (size_t i = 0; i < R::lengths.size(); ++i) {
        if (static_cast<int64_t>(stretches[i].size()) < R::min_stretches) continue;
        std::vector<double> d;
        d.reserve(stretches[i].size());
        for (const Signature& x : stretches[i]) d.push_back(mahalanobis(center, precision, x));
        screen.lengths.push_back(R::lengths[i]);
        screen.limits.push_back(detail::median_in_place(d) / R::chi2_32_median *
                                R::chi2_32_isf_level);
    }
    return screen;
}

}  // namespace tidemark
