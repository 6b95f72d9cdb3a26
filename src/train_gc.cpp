// GC content of a state's emission model and the deterministic GC order of fitted classes.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <numeric>

#include "tidemark/train.hpp"

namespace tidemark {

double state_gc(const StateSpec& s) {
    const size_t rows = s.emissions.size();
    if (rows == 0 && !s.has_gc && s.signature.present()) {
        // A signature-only window state: the GC of its mean chain.
        StateSpec chain;
        chain.emissions = s.signature.mean;
        return state_gc(chain);
    }
    if (rows == 0) return s.gc.mean;  // a window state
    if (rows == 1) return s.emissions[0][base_c] + s.emissions[0][base_g];
    // Stationary distribution over contexts by power iteration on the lazy chain (I + P) / 2,
    // which has the same stationary vector and cannot oscillate.
    const size_t mask = rows - 1;
    std::vector<double> pi(rows, 1.0 / static_cast<double>(rows)), next(rows);
    for (int it = 0; it < 100000; ++it) {
        for (size_t c = 0; c < rows; ++c) next[c] = 0.5 * pi[c];
        for (size_t c = 0; c < rows; ++c)
            for (size_t b = 0; b < 4; ++b)
                next[((c << 2) | b) & mask] += 0.5 * pi[c] * s.emissions[c][b];
        double change = 0;
        for (size_t c = 0; c < rows; ++c) change += std::abs(next[c] - pi[c]);
        pi.swap(next);
        if (change < 1e-14) break;
    }
    double gc = 0;
    for (size_t c = 0; c < rows; ++c)
        gc += pi[c] * (s.emissions[c][base_c] + s.emissions[c][base_g]);
    return gc;
}

Profile order_states_by_gc(const Profile& p, bool rename_classes) {
    const size_t P = p.states.size();
    std::vector<double> gc(P);
    for (size_t s = 0; s < P; ++s) gc[s] = state_gc(p.states[s]);
    std::vector<size_t> order(P);
    std::iota(order.begin(), order.end(), size_t{0});
    std::stable_sort(order.begin(), order.end(), [&](size_t a, size_t b) { return gc[a] < gc[b]; });

    // Regions follow their states when each region has exactly one.
    bool one_each = p.regions.size() == P;
    for (size_t s = 0; one_each && s < P; ++s)
        for (size_t u = 0; u < s; ++u)
            if (p.states[u].region == p.states[s].region) one_each = false;

    Profile q = p;
    for (size_t k = 0; k < P; ++k) {
        q.states[k] = p.states[order[k]];
        q.initial[k] = p.initial[order[k]];
        for (size_t l = 0; l < P; ++l) q.transitions[k][l] = p.transitions[order[k]][order[l]];
        if (one_each) {
            q.regions[k] = p.regions[p.states[order[k]].region];
            q.states[k].region = static_cast<int>(k);
        }
        if (rename_classes) {
            q.states[k].name = fmt::format("class{}", k + 1);
            if (one_each) q.regions[k].name = q.states[k].name;
        }
    }
    if (rename_classes && one_each)
        for (size_t k = 0; k < P; ++k)
            q.regions[k].description = fmt::format(
                "composition class {} of {} in increasing GC "
                "(fitted GC {:.4f})",
                k + 1, P, gc[order[k]]);
    return q;
}

}  // namespace tidemark
