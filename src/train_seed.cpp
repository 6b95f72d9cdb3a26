// Starting points from the data: K-class templates and profiles whose emissions are reseeded
// from GC-ranked windows of the training sequences.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <numeric>

#include "tidemark/error.hpp"
#include "tidemark/train.hpp"
#include "tidemark/window.hpp"

namespace tidemark {
namespace {

// Windows of each contig, in data order, with at least half of their bases known.
struct Windows {
    std::vector<double> gc;  // per usable window
};

void for_each_window(TrainingData& data, int64_t W,
                     const std::function<void(const Contig&, int64_t, int64_t, bool)>& fn) {
    data.for_each([&](const Contig& c) {
        for (int64_t begin = 0; begin < c.length; begin += W) {
            const int64_t end = std::min(c.length, begin + W);
            const Composition comp = composition(c, begin, end);
            fn(c, begin, end, 2 * comp.known() >= W);
        }
    });
}

Windows measure(TrainingData& data, int64_t W) {
    Windows w;
    for_each_window(data, W, [&](const Contig& c, int64_t b, int64_t e, bool usable) {
        if (usable) w.gc.push_back(composition(c, b, e).gc_fraction());
    });
    return w;
}

// Group of every usable window: ranks by GC (ties by data order) cut at the cumulative shares.
std::vector<int> assign_groups(const Windows& w, const std::vector<double>& shares) {
    const size_t n = w.gc.size();
    std::vector<size_t> order(n);
    std::iota(order.begin(), order.end(), size_t{0});
    std::stable_sort(order.begin(), order.end(),
                     [&](size_t a, size_t b) { return w.gc[a] < w.gc[b]; });
    const double total = std::accumulate(shares.begin(), shares.end(), 0.0);
    std::vector<int> group(n, 0);
    double cum = 0;
    size_t next = 0;
    for (size_t g = 0; g < shares.size(); ++g) {
        cum += shares[g];
        const size_t end =
            g + 1 == shares.size()
                ? n
                : static_cast<size_t>(std::llround(cum / total * static_cast<double>(n)));
        for (; next < std::min(end, n); ++next) group[order[next]] = static_cast<int>(g);
    }
    return group;
}

// Order-k counts of every group (k per group): positions inside the group's windows whose k
// preceding bases are known (the context may reach back into the previous window).
std::vector<std::vector<std::array<double, 4>>> count_groups(TrainingData& data, int64_t W,
                                                             const std::vector<int>& group,
                                                             const std::vector<int>& orders) {
    std::vector<std::vector<std::array<double, 4>>> counts;
    for (int k : orders) counts.emplace_back(size_t{1} << (2 * k), std::array<double, 4>{});
    size_t index = 0;
    std::vector<uint8_t> bases;
    data.for_each([&](const Contig& c) {
        RollingContext ctx;
        for (int64_t begin = 0; begin < c.length; begin += W) {
            const int64_t end = std::min(c.length, begin + W);
            int g = -1;
            if (2 * composition(c, begin, end).known() >= W) g = group.at(index++);
            bases.resize(static_cast<size_t>(end - begin));
            c.unpack(begin, end - begin, bases.data());
            for (uint8_t b : bases) {
                if (g >= 0 && b != base_unknown && ctx.complete(orders[g]))
                    counts[g][ctx.row(orders[g])][b] += 1;
                ctx.push(b);
            }
        }
    });
    return counts;
}

// Add-one (Laplace) smoothing, common practice for seeds: no context row is left at zero.
std::vector<std::array<double, 4>> smoothed(const std::vector<std::array<double, 4>>& counts,
                                            const std::vector<std::array<double, 4>>& shape) {
    std::vector<std::array<double, 4>> rows(counts.size());
    for (size_t r = 0; r < counts.size(); ++r) {
        double total = 0;
        for (int b = 0; b < 4; ++b)
            if (shape[r][b] > 0) total += rows[r][b] = counts[r][b] + 1;
        for (int b = 0; b < 4; ++b) rows[r][b] /= total;
    }
    return rows;
}

void check_window(const SeedOptions& o) {
    if (o.window < 10) throw UsageError("--init-window must be at least 10 bases");
}

// Stationary distribution of the transitions (power iteration on the lazy chain).
std::vector<double> stationary(const Profile& p) {
    const size_t P = p.states.size();
    std::vector<double> pi(P, 1.0 / static_cast<double>(P)), next(P);
    for (int it = 0; it < 1000000; ++it) {
        for (size_t i = 0; i < P; ++i) next[i] = 0.5 * pi[i];
        for (size_t i = 0; i < P; ++i)
            for (size_t j = 0; j < P; ++j) next[j] += 0.5 * pi[i] * p.transitions[i][j];
        double change = 0;
        for (size_t i = 0; i < P; ++i) change += std::abs(next[i] - pi[i]);
        pi.swap(next);
        if (change < 1e-15) break;
    }
    return pi;
}

}  // namespace

Profile class_template(TrainingData& data, int K, int order, const SeedOptions& o) {
    check_window(o);
    if (K < 1) throw UsageError("--classes must be at least 1");
    if (order < 0 || order > max_emission_order)
        throw UsageError(fmt::format("--order must be from 0 to {}", max_emission_order));
    const Windows w = measure(data, o.window);
    if (w.gc.size() < static_cast<size_t>(K))
        throw InputError(
            fmt::format("too little sequence to seed {} classes: {} window(s) of {} bases "
                        "with at least half of their bases known (lower --init-window)",
                        K, w.gc.size(), o.window));
    const std::vector<int> group = assign_groups(w, std::vector<double>(K, 1.0));
    const std::vector<std::array<double, 4>> shape(size_t{1} << (2 * order), {1, 1, 1, 1});
    const auto counts = count_groups(data, o.window, group, std::vector<int>(K, order));

    Profile p;
    p.name = fmt::format("classes{}-order{}", K, order);
    p.description = fmt::format(
        "{} composition classes with order-{} emissions, fitted to the "
        "training sequences by tidemark fit",
        K, order);
    p.sources.push_back(fmt::format(
        "Template generated by tidemark fit: windows of {} bases ranked by GC and split into {} "
        "equal groups seed the classes' order-{} emissions (add-one smoothed); switch probability "
        "1/{} per base split equally among the other classes and uniform initial probabilities "
        "(tidemark's choices); all parameters then fitted as recorded under provenance.",
        o.window, K, order, o.window));
    for (int k = 0; k < K; ++k) {
        const std::string name = fmt::format("class{}", k + 1);
        RegionSpec region;
        region.name = name;
        region.report = true;
        region.description = fmt::format("composition class {} of {} in increasing GC", k + 1, K);
        p.regions.push_back(std::move(region));
        StateSpec s;
        s.name = name;
        s.region = k;
        s.order = order;
        s.emissions = smoothed(counts[k], shape);
        p.states.push_back(std::move(s));
    }
    p.initial.assign(K, 1.0 / K);
    const double leave = K > 1 ? 1.0 / static_cast<double>(o.window) : 0.0;
    p.transitions.assign(K, std::vector<double>(K, K > 1 ? leave / (K - 1) : 0.0));
    for (int k = 0; k < K; ++k) p.transitions[k][k] = 1.0 - leave;
    // Round trip through the validator: the template must be a valid profile like any file.
    return parse_profile(to_json(p), "template " + p.name);
}

namespace {

// Window profiles: each state (in increasing mean GC) gets a GC-ranked slice of the profile's own
// windows as large as its stationary share; its mean is the slice's pooled G+C fraction and its
// dispersion the method-of-moments value of the beta-binomial, rho = (V / (m (1 - m)) - 1/n) /
// (1 - 1/n) with V the variance of the windows' GC fractions and n their mean size (common
// practice for a starting value; Baum-Welch then fits both).
// Signature states: every state's mean rows become the genome's own transition frequencies,
// from the k-mers of its usable windows on both strands (plus 1/2 per k-mer, so that no mean is
// 0); the concentrations stay the template's, which fix the classes' roles (high: typical, low:
// atypical). Baum-Welch then fits both (tidemark's design: the typical class starts as the
// genome's own signature, see data/profiles/composition-shift.json).
void seed_signatures(Profile& q, const std::vector<uint32_t>& pooled) {
    const int k = q.states.front().signature.k;
    std::vector<double> both(pooled.size());
    for (size_t code = 0; code < pooled.size(); ++code)
        both[code] =
            0.5 + pooled[code] + pooled[reverse_complement_kmer(static_cast<uint32_t>(code), k)];
    std::vector<std::array<double, 4>> mean(pooled.size() / 4);
    for (size_t c = 0; c < mean.size(); ++c) {
        const double total = both[c * 4] + both[c * 4 + 1] + both[c * 4 + 2] + both[c * 4 + 3];
        for (int b = 0; b < 4; ++b) mean[c][b] = both[c * 4 + b] / total;
    }
    for (StateSpec& st : q.states) st.signature.mean = mean;
}

Profile seed_window_profile(const Profile& profile, TrainingData& data) {
    const size_t P = profile.states.size();
    const int64_t W = profile.window_size;
    const int sig_k = profile.states.front().signature.k;
    std::vector<WindowCount> counts;
    std::vector<uint32_t> pooled(sig_k > 0 ? size_t{1} << (2 * sig_k) : 0, 0);
    std::vector<uint8_t> bases;
    Windows w;
    for_each_window(data, W, [&](const Contig& c, int64_t b, int64_t e, bool usable) {
        if (!usable) return;
        const Composition comp = composition(c, b, e);
        counts.push_back({comp.c + comp.g, comp.known(), {}});
        w.gc.push_back(comp.gc_fraction());
        if (sig_k > 0) {
            bases.resize(static_cast<size_t>(e - b));
            c.unpack(b, e - b, bases.data());
            count_kmers(bases.data(), e - b, sig_k, pooled.data());
        }
    });
    if (w.gc.size() < 2 * P)
        throw InputError(fmt::format(
            "too little sequence to seed the {} states of profile '{}': {} window(s) of {} "
            "bases with at least half of their bases known (at least {} needed)",
            P, profile.name, w.gc.size(), W, 2 * P));
    if (!profile.states.front().has_gc) {  // signature only
        Profile q = profile;
        seed_signatures(q, pooled);
        q.sources.push_back(fmt::format(
            "signature means reseeded from the training sequences by tidemark fit: the k-mers "
            "of the profile's windows of {} bases on both strands; then fitted as recorded "
            "under provenance.",
            W));
        return q;
    }
    std::vector<size_t> rank(P);
    std::iota(rank.begin(), rank.end(), size_t{0});
    std::stable_sort(rank.begin(), rank.end(), [&](size_t a, size_t b) {
        return profile.states[a].gc.mean < profile.states[b].gc.mean;
    });
    const std::vector<double> pi = stationary(profile);
    std::vector<double> shares(P);
    for (size_t g = 0; g < P; ++g) shares[g] = pi[rank[g]];
    const std::vector<int> group = assign_groups(w, shares);
    Profile q = profile;
    for (size_t g = 0; g < P; ++g) {
        double k = 0, n = 0, sum = 0, sum2 = 0, windows = 0;
        for (size_t i = 0; i < counts.size(); ++i) {
            if (group[i] != static_cast<int>(g)) continue;
            k += static_cast<double>(counts[i].gc);
            n += static_cast<double>(counts[i].known);
            sum += w.gc[i];
            sum2 += w.gc[i] * w.gc[i];
            windows += 1;
        }
        if (windows < 2) continue;  // keeps its starting values
        WindowGC& gc = q.states[rank[g]].gc;
        gc.mean = std::clamp(k / n, 1e-6, 1 - 1e-6);
        const double variance = std::max(0.0, sum2 / windows - (sum / windows) * (sum / windows));
        const double size = n / windows;
        gc.dispersion = std::clamp(
            (variance / (gc.mean * (1 - gc.mean)) - 1 / size) / (1 - 1 / size), 1e-6, 0.5);
    }
    if (sig_k > 0) seed_signatures(q, pooled);
    // Tied states share one distribution: the first member's.
    for (size_t s = 0; s < P; ++s)
        if (!q.states[s].tie.empty())
            for (size_t u = 0; u < s; ++u)
                if (q.states[u].tie == q.states[s].tie) {
                    q.states[s].gc = q.states[u].gc;
                    break;
                }
    q.sources.push_back(
        fmt::format("gc reseeded from the training sequences by tidemark fit: the profile's "
                    "windows of {} bases ranked by GC, "
                    "each state (in increasing GC) given a slice as large as its stationary share "
                    "(mean: the slice's G+C "
                    "fraction; dispersion: its method-of-moments value); then fitted as recorded "
                    "under provenance.",
                    W));
    return q;
}

}  // namespace

Profile seed_from_data(const Profile& profile, TrainingData& data, const SeedOptions& o) {
    if (profile.windowed()) return seed_window_profile(profile, data);
    check_window(o);
    const size_t P = profile.states.size();
    const Windows w = measure(data, o.window);
    if (w.gc.size() < P)
        throw InputError(
            fmt::format("too little sequence to seed the {} states of profile '{}': {} "
                        "window(s) of {} bases with at least half of their bases known",
                        P, profile.name, w.gc.size(), o.window));
    std::vector<double> gc(P);
    for (size_t s = 0; s < P; ++s) gc[s] = state_gc(profile.states[s]);
    std::vector<size_t> rank(P);
    std::iota(rank.begin(), rank.end(), size_t{0});
    std::stable_sort(rank.begin(), rank.end(), [&](size_t a, size_t b) { return gc[a] < gc[b]; });
    const std::vector<double> pi = stationary(profile);
    std::vector<double> shares(P);
    std::vector<int> orders(P);
    for (size_t g = 0; g < P; ++g) {
        shares[g] = pi[rank[g]];
        orders[g] = profile.states[rank[g]].order;
    }
    const std::vector<int> group = assign_groups(w, shares);
    const auto counts = count_groups(data, o.window, group, orders);

    // Tied states share one table: pool their slices.
    std::vector<std::vector<std::array<double, 4>>> by_state(P);
    for (size_t g = 0; g < P; ++g) by_state[rank[g]] = counts[g];
    Profile q = profile;
    for (size_t s = 0; s < P; ++s) {
        auto pooled = by_state[s];
        if (!profile.states[s].tie.empty())
            for (size_t u = 0; u < P; ++u)
                if (u != s && profile.states[u].tie == profile.states[s].tie)
                    for (size_t r = 0; r < pooled.size(); ++r)
                        for (int b = 0; b < 4; ++b) pooled[r][b] += by_state[u][r][b];
        q.states[s].emissions = smoothed(pooled, profile.states[s].emissions);
    }
    q.sources.push_back(fmt::format(
        "Emissions reseeded from the training sequences by tidemark fit --init-from-data: windows "
        "of {} bases ranked by GC, each state (in increasing GC of its starting emissions) given a "
        "slice as large as its stationary share; then fitted as recorded under provenance.",
        o.window));
    return q;
}

}  // namespace tidemark
