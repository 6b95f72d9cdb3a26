// Training M-step: Dirichlet-smoothed re-estimation from counts (with the exact row for
// min_length chains and pooled tie groups), the matching log-prior, freezing and parameter
// counts.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "tidemark/error.hpp"
#include "tidemark/train.hpp"

namespace tidemark {
namespace {

// A chain's in-chain steps divide by the in-region mass, so it must stay positive.
constexpr double min_stay = 1e-12;

// Index of the first state of each state's tie group (itself when untied).
std::vector<int> tie_leaders(const Profile& p) {
    std::vector<int> leader(p.states.size());
    for (size_t i = 0; i < p.states.size(); ++i) {
        leader[i] = static_cast<int>(i);
        if (p.states[i].tie.empty()) continue;
        for (size_t j = 0; j < i; ++j)
            if (p.states[j].tie == p.states[i].tie) {
                leader[i] = static_cast<int>(j);
                break;
            }
    }
    return leader;
}

// Digamma function: the recurrence psi(x) = psi(x + 1) - 1/x up to x >= 6, then the asymptotic
// series (Abramowitz & Stegun 1964, Handbook of Mathematical Functions, 6.3.18); absolute error
// below 1e-13 there.
double digamma(double x) {
    double shift = 0;
    while (x < 6) {
        shift -= 1 / x;
        x += 1;
    }
    const double r = 1 / (x * x);
    return shift + std::log(x) - 0.5 / x -
           r * (1.0 / 12 - r * (1.0 / 120 - r * (1.0 / 252 - r * (1.0 / 240 - r * (1.0 / 132)))));
}

// Beta-binomial maximum likelihood from weighted windows by Minka's (2000) fixed point for the
// Polya distribution, two categories (G+C and A+T):
//   alpha <- alpha * sum_i w_i [psi(k_i + alpha) - psi(alpha)] / sum_i w_i [psi(n_i + A) - psi(A)],
// the same for beta with n_i - k_i, A = alpha + beta. Each step maximises a lower bound of the
// weighted log-likelihood that touches it at the current value, so no step lowers it.
WindowGC fit_window_gc(const WindowGC& current,
                       const std::vector<std::pair<const WindowTally*, double>>& data) {
    double total = 1 / current.dispersion - 1;
    double alpha = current.mean * total, beta = (1 - current.mean) * total;
    double weight = 0;
    for (const auto& [t, w] : data) weight += w;
    if (!(weight > 0)) return current;
    constexpr int max_steps = 10000;
    constexpr double tolerance = 1e-12;
    for (int step = 0; step < max_steps; ++step) {
        const double A = alpha + beta;
        double num_a = 0, num_b = 0, den = 0;
        const double pa = digamma(alpha), pb = digamma(beta), pA = digamma(A);
        for (const auto& [t, w] : data) {
            if (w == 0) continue;
            const double k = static_cast<double>(t->gc), n = static_cast<double>(t->known);
            num_a += w * (digamma(k + alpha) - pa);
            num_b += w * (digamma(n - k + beta) - pb);
            den += w * (digamma(n + A) - pA);
        }
        if (!(den > 0) || !(num_a > 0) || !(num_b > 0)) break;  // all-G+C or all-A+T windows
        const double next_a = alpha * num_a / den, next_b = beta * num_b / den;
        const double change = std::abs(next_a - alpha) / alpha + std::abs(next_b - beta) / beta;
        alpha = next_a;
        beta = next_b;
        if (change < tolerance) break;
    }
    // Keep the distribution proper and representable (rho in (0, 1)).
    const double A = std::clamp(alpha + beta, 1e-6, 1e12);
    WindowGC out;
    out.mean = std::clamp(alpha / (alpha + beta), 1e-9, 1 - 1e-9);
    out.dispersion = 1 / (A + 1);
    return out;
}

void check_shapes(const Profile& a, const Profile& b) {
    bool same = a.states.size() == b.states.size();
    for (size_t i = 0; same && i < a.states.size(); ++i)
        same = a.states[i].order == b.states[i].order && a.states[i].region == b.states[i].region;
    if (!same) throw InternalError("M-step: structure and current profile differ in shape");
}

}  // namespace

void parse_freeze(const std::string& word, Freeze& f) {
    const auto colon = word.find(':');
    const std::string what = word.substr(0, colon);
    const std::string state = colon == std::string::npos ? "" : word.substr(colon + 1);
    if (colon != std::string::npos && state.empty())
        throw UsageError(fmt::format("--freeze {}: a state name must follow ':'", word));
    if (what == "initial" && state.empty()) {
        f.initial = true;
    } else if (what == "transitions") {
        if (state.empty())
            f.transitions = true;
        else
            f.transition_states.push_back(state);
    } else if (what == "emissions") {
        if (state.empty())
            f.emissions = true;
        else
            f.emission_states.push_back(state);
    } else {
        throw UsageError(
            fmt::format("--freeze {}: expected initial, transitions, emissions, "
                        "transitions:STATE or emissions:STATE",
                        word));
    }
}

FreezeMask resolve_freeze(const Freeze& f, const Profile& p) {
    FreezeMask m;
    const size_t P = p.states.size();
    m.initial = f.initial;
    m.transitions.assign(P, f.transitions);
    m.emissions.assign(P, f.emissions);
    const auto find = [&](const std::string& name, const char* what) {
        const int s = p.state_index(name);
        if (s < 0) {
            std::string names;
            for (const auto& st : p.states) names += (names.empty() ? "" : ", ") + st.name;
            throw UsageError(
                fmt::format("--freeze {}:{}: profile '{}' has no state '{}' (states: {})", what,
                            name, p.name, name, names));
        }
        return s;
    };
    for (const auto& n : f.transition_states) m.transitions[find(n, "transitions")] = true;
    for (const auto& n : f.emission_states) m.emissions[find(n, "emissions")] = true;
    // A tie group has one table: frozen when any member is.
    const std::vector<int> leader = tie_leaders(p);
    for (size_t i = 0; i < P; ++i)
        if (m.emissions[i]) m.emissions[leader[i]] = true;
    for (size_t i = 0; i < P; ++i) m.emissions[i] = m.emissions[leader[i]];
    return m;
}

Profile maximise(const Profile& structure, const Profile& current, const TrainingCounts& counts,
                 const FreezeMask& freeze, const MStepOptions& options) {
    check_shapes(structure, current);
    const double a = options.pseudocount;
    const size_t P = structure.states.size();
    Profile out = current;

    if (!freeze.initial) {
        std::vector<double> c(P, 0.0);
        double total = 0;
        for (size_t s = 0; s < P; ++s)
            if (structure.initial[s] > 0) total += c[s] = counts.initial[s] + a;
        if (total > 0)
            for (size_t s = 0; s < P; ++s) out.initial[s] = c[s] / total;
    }

    for (size_t s = 0; s < P; ++s) {
        if (freeze.transitions[s]) continue;
        const int region = structure.states[s].region;
        std::vector<double> n(P, 0.0);
        double in = 0, away = 0;
        bool can_leave = false;
        for (size_t u = 0; u < P; ++u) {
            if (!(structure.transitions[s][u] > 0)) continue;
            n[u] = counts.transitions[s][u] + a;
            if (structure.states[u].region == region) {
                in += n[u];
            } else {
                away += n[u];
                can_leave = true;
            }
        }
        auto& row = out.transitions[s];
        if (structure.regions[region].min_length <= 1) {
            const double total = in + away;
            if (total > 0)
                for (size_t u = 0; u < P; ++u) row[u] = n[u] / total;
            continue;
        }
        // Chain row: maximise sum_u n_u ln A_su - M ln R with R the in-region mass and M the
        // forced in-chain steps. In-region shares follow all copies' counts, R the tail's.
        if (!(in > 0)) continue;  // no count inside the region (only with pseudocount 0)
        const double tail_in = std::max(0.0, in - counts.chain_steps[s]);
        double stay = 1.0;
        if (can_leave) {
            double old_stay = 0;
            for (size_t u = 0; u < P; ++u)
                if (structure.states[u].region == region) old_stay += current.transitions[s][u];
            stay = tail_in + away > 0 ? tail_in / (tail_in + away) : old_stay;
            stay = std::clamp(stay, min_stay, 1.0);
        }
        for (size_t u = 0; u < P; ++u) {
            if (!(structure.transitions[s][u] > 0)) {
                row[u] = 0;
            } else if (structure.states[u].region == region) {
                row[u] = stay * n[u] / in;
            } else {
                row[u] = away > 0 ? (1 - stay) * n[u] / away : 0.0;
            }
        }
    }

    const std::vector<int> leader = tie_leaders(structure);
    if (structure.windowed()) {
        for (size_t s = 0; s < P; ++s) {
            if (leader[s] != static_cast<int>(s) || freeze.emissions[s]) continue;
            std::vector<std::pair<const WindowTally*, double>> data;
            data.reserve(counts.windows.size());
            for (const WindowTally& t : counts.windows) {
                double w = 0;
                for (size_t u = 0; u < P; ++u)
                    if (leader[u] == static_cast<int>(s)) w += t.weight[u];
                data.emplace_back(&t, w);
            }
            const WindowGC gc = fit_window_gc(current.states[s].gc, data);
            for (size_t u = 0; u < P; ++u)
                if (leader[u] == static_cast<int>(s)) out.states[u].gc = gc;
        }
        return out;
    }
    for (size_t s = 0; s < P; ++s) {
        if (leader[s] != static_cast<int>(s) || freeze.emissions[s]) continue;
        const auto& shape = structure.states[s].emissions;
        std::vector<std::array<double, 4>> pooled(shape.size(), std::array<double, 4>{});
        for (size_t u = 0; u < P; ++u)
            if (leader[u] == static_cast<int>(s))
                for (size_t r = 0; r < shape.size(); ++r)
                    for (int b = 0; b < 4; ++b) pooled[r][b] += counts.emissions[u][r][b];
        auto rows = current.states[s].emissions;
        for (size_t r = 0; r < shape.size(); ++r) {
            std::array<double, 4> c{};
            double total = 0;
            for (int b = 0; b < 4; ++b)
                if (shape[r][b] > 0) total += c[b] = pooled[r][b] + a;
            if (total > 0)
                for (int b = 0; b < 4; ++b) rows[r][b] = c[b] / total;
        }
        for (size_t u = 0; u < P; ++u)
            if (leader[u] == static_cast<int>(s)) out.states[u].emissions = rows;
    }
    return out;
}

double log_prior(const Profile& structure, const Profile& current, const FreezeMask& freeze,
                 double a) {
    if (a == 0) return 0;
    check_shapes(structure, current);
    const size_t P = structure.states.size();
    double sum = 0;
    const auto term = [&](double shape, double value) {
        if (shape > 0) sum += a * std::log(value);
    };
    if (!freeze.initial)
        for (size_t s = 0; s < P; ++s) term(structure.initial[s], current.initial[s]);
    for (size_t s = 0; s < P; ++s)
        if (!freeze.transitions[s])
            for (size_t u = 0; u < P; ++u)
                term(structure.transitions[s][u], current.transitions[s][u]);
    const std::vector<int> leader = tie_leaders(structure);
    for (size_t s = 0; s < P; ++s) {
        if (leader[s] != static_cast<int>(s) || freeze.emissions[s]) continue;
        const auto& shape = structure.states[s].emissions;
        for (size_t r = 0; r < shape.size(); ++r)
            for (int b = 0; b < 4; ++b) term(shape[r][b], current.states[s].emissions[r][b]);
    }
    return sum;
}

int64_t free_parameters(const Profile& structure, const FreezeMask& freeze) {
    const size_t P = structure.states.size();
    const auto dims = [](auto begin, auto end) {
        const int64_t nz = std::count_if(begin, end, [](double x) { return x > 0; });
        return std::max<int64_t>(0, nz - 1);
    };
    int64_t k = 0;
    if (!freeze.initial) k += dims(structure.initial.begin(), structure.initial.end());
    for (size_t s = 0; s < P; ++s)
        if (!freeze.transitions[s])
            k += dims(structure.transitions[s].begin(), structure.transitions[s].end());
    const std::vector<int> leader = tie_leaders(structure);
    for (size_t s = 0; s < P; ++s) {
        if (leader[s] != static_cast<int>(s) || freeze.emissions[s]) continue;
        if (structure.windowed()) k += 2;  // the beta-binomial's mean and dispersion
        for (const auto& row : structure.states[s].emissions) k += dims(row.begin(), row.end());
    }
    return k;
}

}  // namespace tidemark
