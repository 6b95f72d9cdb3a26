// Test-only oracle for the training tests: every state path of a short sequence, weighted by
// the profile format's own definition (min_length segments included), independent of the
// compiled Model and of the decoders.
#pragma once

#include <cctype>
#include <cmath>
#include <functional>
#include <string>
#include <vector>

#include "tidemark/train.hpp"

namespace tidemark::test {

inline const std::string path_acgt = "ACGT";

inline int path_code(char ch) {
    const size_t b = path_acgt.find(static_cast<char>(std::toupper(ch)));
    return b == std::string::npos ? 4 : static_cast<int>(b);
}

// Row of state s at t from the profile format's definition, or -1 when fewer than k known bases
// immediately precede t (then the mean row applies).
inline int path_context_row(const Profile& p, int s, const std::string& seq, size_t t) {
    const size_t k = static_cast<size_t>(p.states[s].order);
    if (t < k) return -1;
    int row = 0;
    for (size_t j = t - k; j < t; ++j) {
        const int c = path_code(seq[j]);
        if (c == 4) return -1;
        row = row * 4 + c;
    }
    return row;
}

inline double path_emission(const Profile& p, int s, const std::string& seq, size_t t) {
    const int b = path_code(seq[t]);
    if (b == 4) return 1.0;
    const int row = path_context_row(p, s, seq, t);
    if (row >= 0) return p.states[s].emissions[row][b];
    double mean = 0;
    for (const auto& r : p.states[s].emissions) mean += r[b];
    return mean / static_cast<double>(p.states[s].emissions.size());
}

// Every path of profile states, weighted by the profile format's semantics including min_length:
// while a segment is shorter than its region's min_length it must stay in the region, with the
// in-region transitions renormalised; latent contexts share a mean-row position's posterior in
// proportion to each row's probability of the base (the rule documented in train.hpp).
inline TrainingCounts enumerate(const Profile& p, const std::string& seq,
                                std::vector<double>* posterior = nullptr) {
    const int P = static_cast<int>(p.states.size());
    const size_t n = seq.size();
    TrainingCounts c = TrainingCounts::zero(p);
    std::vector<double> stay(P, 0.0);
    for (int s = 0; s < P; ++s)
        for (int u = 0; u < P; ++u)
            if (p.states[u].region == p.states[s].region) stay[s] += p.transitions[s][u];
    std::vector<int> path(n, 0);
    double total = 0;
    if (posterior) posterior->assign(n * P, 0.0);
    TrainingCounts acc = TrainingCounts::zero(p);
    std::function<void(size_t)> rec = [&](size_t t) {
        if (t < n) {
            for (int s = 0; s < P; ++s) {
                path[t] = s;
                rec(t + 1);
            }
            return;
        }
        double w = p.initial[path[0]] * path_emission(p, path[0], seq, 0);
        int copy = 1;
        std::vector<std::pair<int, int>> steps;  // (from, chain?) per transition
        for (size_t i = 1; i < n && w > 0; ++i) {
            const int s = path[i - 1], u = path[i];
            const bool same = p.states[u].region == p.states[s].region;
            const int64_t L = p.regions[p.states[s].region].min_length;
            const bool chain = copy < L;
            if (chain) {
                if (!same)
                    w = 0;
                else
                    w *= p.transitions[s][u] / stay[s];
            } else {
                w *= p.transitions[s][u];
            }
            steps.emplace_back(s, chain);
            copy = same ? static_cast<int>(std::min<int64_t>(copy + 1, L)) : 1;
            w *= path_emission(p, u, seq, i);
        }
        if (!(w > 0)) return;
        total += w;
        if (posterior)
            for (size_t i = 0; i < n; ++i) (*posterior)[i * P + path[i]] += w;
        acc.initial[path[0]] += w;
        for (size_t i = 1; i < n; ++i) {
            acc.transitions[path[i - 1]][path[i]] += w;
            if (steps[i - 1].second) acc.chain_steps[path[i - 1]] += w;
        }
        for (size_t i = 0; i < n; ++i) {
            const int b = path_code(seq[i]);
            if (b == 4) continue;
            const int s = path[i];
            const int row = path_context_row(p, s, seq, i);
            auto& rows = acc.emissions[s];
            if (row >= 0) {
                rows[row][b] += w;
            } else {
                double sum = 0;
                for (const auto& r : p.states[s].emissions) sum += r[b];
                for (size_t r = 0; r < rows.size(); ++r)
                    rows[r][b] += w * p.states[s].emissions[r][b] / sum;
            }
        }
    };
    rec(0);
    for (int s = 0; s < P; ++s) {
        c.initial[s] = acc.initial[s] / total;
        c.chain_steps[s] = acc.chain_steps[s] / total;
        for (int u = 0; u < P; ++u) c.transitions[s][u] = acc.transitions[s][u] / total;
        for (size_t r = 0; r < c.emissions[s].size(); ++r)
            for (int b = 0; b < 4; ++b) c.emissions[s][r][b] = acc.emissions[s][r][b] / total;
    }
    c.log_likelihood = std::log(total);
    if (posterior)
        for (double& x : *posterior) x /= total;
    return c;
}

}  // namespace tidemark::test
