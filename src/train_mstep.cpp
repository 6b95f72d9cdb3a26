// Training M-step: Dirichlet-smoothed re-estimation from counts (with the exact row for
// min_length chains and pooled tie groups), the matching log-prior, freezing and parameter
// counts.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include "tidemark/error.hpp"
#include "tidemark/train.hpp"
#include "tidemark/window.hpp"
#include "train_signature.hpp"

namespace tidemark {
namespace detail {

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

}  // namespace detail

namespace {

using detail::digamma;

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

// ---------------------------------------------------------------------------------------------
// The GC order of window states (gc.below / gc.above): the M-step under the constraint.
//
// Why EM still never lowers the likelihood. The window part of Q is a sum over states of
// Q_s(mean_s, rho_s) = sum_i w_is ln BB(k_i | n_i, mean_s, rho_s). The order constraints
// (mean_c <= mean_r for a 'below' state c of reference r, >= for 'above') define a feasible
// set that holds the current parameters (the validator requires a profile to satisfy its
// order, and every M-step returns a feasible point). The step below returns the feasible
// candidate of largest Q among a set that always contains the current parameters, so
// Q(new) >= Q(current); by the EM inequality ln L(new) - ln L(current) >= Q(new) - Q(current)
// (Dempster, Laird & Rubin 1977, J. R. Statist. Soc. B 39:1-38: any step that does not lower Q
// is a generalised EM step) the likelihood does not decrease. The other candidates aim at the
// constrained maximum: at it, each ordered state is either at its own unconstrained optimum
// (constraint inactive) or shares its reference's mean (active), and the reference's mean then
// maximises the sum over the tied block; trying every subset of tied states (at most 2^8) and
// keeping the feasible ones finds it when each state's profile function g_s(m) = max_rho Q_s is
// unimodal (the block's maximiser then lies between its members' own optima).

// Windows with the same (k, n) share every term of Q: one entry per distinct pair.
struct WindowGroups {
    std::vector<int64_t> k, n;
    std::vector<size_t> of_window;  // group of each window of counts.windows
};

WindowGroups group_windows(const std::vector<WindowTally>& windows) {
    std::vector<size_t> order(windows.size());
    for (size_t i = 0; i < order.size(); ++i) order[i] = i;
    std::sort(order.begin(), order.end(), [&](size_t a, size_t b) {
        return std::pair(windows[a].known, windows[a].gc) <
               std::pair(windows[b].known, windows[b].gc);
    });
    WindowGroups g;
    g.of_window.resize(windows.size());
    for (size_t i : order) {
        if (g.k.empty() || g.k.back() != windows[i].gc || g.n.back() != windows[i].known) {
            g.k.push_back(windows[i].gc);
            g.n.push_back(windows[i].known);
        }
        g.of_window[i] = g.k.size() - 1;
    }
    return g;
}

// Q_s(mean, total) with total = alpha + beta = 1/rho - 1.
double window_q(const WindowGroups& g, const std::vector<double>& w, double mean, double total) {
    const double alpha = mean * total, beta = (1 - mean) * total;
    double q = 0;
    for (size_t j = 0; j < w.size(); ++j)
        if (w[j] != 0) q += w[j] * beta_binomial_log_kernel(alpha, beta, g.k[j], g.n[j]);
    return q;
}

double window_q(const WindowGroups& g, const std::vector<double>& w, const WindowGC& gc) {
    return window_q(g, w, gc.mean, 1 / gc.dispersion - 1);
}

// The range of alpha + beta the M-step keeps (rho from 1e-12 to 1 - 1e-6), as fit_window_gc.
constexpr double min_total = 1e-6, max_total = 1e12;

// The dispersion that maximises Q_s at a fixed mean (on the log scale of alpha + beta).
WindowGC best_dispersion(const WindowGroups& g, const std::vector<double>& w, double mean) {
    const double u = detail::golden_max([&](double x) { return window_q(g, w, mean, std::exp(x)); },
                                        std::log(min_total), std::log(max_total), 1e-9);
    return WindowGC{mean, 1 / (std::exp(u) + 1)};
}

// One reference and the states its mean orders, with everything the candidates need.
struct OrderGroup {
    size_t reference = 0;
    std::vector<size_t> ordered;
};

void maximise_ordered_window_states(const Profile& structure, const Profile& current,
                                    const TrainingCounts& counts, const FreezeMask& freeze,
                                    const std::vector<WindowGC>& unconstrained, Profile& out) {
    const size_t P = structure.states.size();
    std::vector<OrderGroup> groups;
    for (size_t s = 0; s < P; ++s) {
        if (structure.states[s].gc_reference.empty()) continue;
        const size_t r =
            static_cast<size_t>(structure.state_index(structure.states[s].gc_reference));
        auto it = std::find_if(groups.begin(), groups.end(),
                               [&](const OrderGroup& o) { return o.reference == r; });
        if (it == groups.end()) {
            groups.push_back(OrderGroup{r, {}});
            it = groups.end() - 1;
        }
        it->ordered.push_back(s);
    }
    if (groups.empty()) return;
    const WindowGroups wg = group_windows(counts.windows);
    const auto weights = [&](size_t s) {
        std::vector<double> w(wg.k.size(), 0.0);
        for (size_t i = 0; i < counts.windows.size(); ++i)
            w[wg.of_window[i]] += counts.windows[i].weight[s];
        return w;
    };
    for (const OrderGroup& group : groups) {
        std::vector<size_t> members{group.reference};
        members.insert(members.end(), group.ordered.begin(), group.ordered.end());
        std::vector<std::vector<double>> w;
        for (size_t s : members) w.push_back(weights(s));
        const auto side = [&](size_t m) { return structure.states[members[m]].gc_side; };
        const auto total_q = [&](const std::vector<WindowGC>& gc) {
            double q = 0;
            for (size_t m = 0; m < members.size(); ++m) q += window_q(wg, w[m], gc[m]);
            return q;
        };
        // Each member's own optimum (frozen members keep their values).
        std::vector<WindowGC> own(members.size());
        for (size_t m = 0; m < members.size(); ++m)
            own[m] = freeze.emissions[members[m]] ? current.states[members[m]].gc
                                                  : unconstrained[members[m]];
        const bool reference_frozen = freeze.emissions[group.reference];

        std::vector<WindowGC> best(members.size());
        for (size_t m = 0; m < members.size(); ++m) best[m] = current.states[members[m]].gc;
        bool current_feasible = true;
        for (size_t m = 1; m < members.size(); ++m)
            if (side(m) * (best[m].mean - best[0].mean) < 0) current_feasible = false;
        double best_q = current_feasible ? total_q(best) : -std::numeric_limits<double>::infinity();

        const size_t subsets = size_t{1} << group.ordered.size();
        for (size_t mask = 0; mask < subsets; ++mask) {
            std::vector<size_t> tied;  // member indices tied to the reference
            bool possible = true;
            for (size_t j = 0; j < group.ordered.size(); ++j)
                if ((mask >> j) & 1) {
                    if (freeze.emissions[group.ordered[j]]) possible = false;
                    tied.push_back(j + 1);
                }
            if (!possible) continue;
            std::vector<WindowGC> gc = own;
            if (!tied.empty()) {
                // The block's mean: between its members' own optima, or the frozen reference's.
                double mean = own[0].mean;
                const auto block_q = [&](double mu) {
                    double q =
                        reference_frozen ? 0.0 : window_q(wg, w[0], best_dispersion(wg, w[0], mu));
                    for (size_t m : tied) q += window_q(wg, w[m], best_dispersion(wg, w[m], mu));
                    return q;
                };
                if (!reference_frozen) {
                    double lo = own[0].mean, hi = own[0].mean;
                    for (size_t m : tied) {
                        lo = std::min(lo, own[m].mean);
                        hi = std::max(hi, own[m].mean);
                    }
                    if (hi > lo) mean = detail::golden_max(block_q, lo, hi, 1e-10);
                    gc[0] = best_dispersion(wg, w[0], mean);
                }
                for (size_t m : tied) gc[m] = best_dispersion(wg, w[m], mean);
            }
            bool feasible = true;
            for (size_t m = 1; m < members.size(); ++m)
                if (side(m) * (gc[m].mean - gc[0].mean) < 0) feasible = false;
            if (!feasible) continue;
            const double q = total_q(gc);
            if (q > best_q) {
                best_q = q;
                best = gc;
            }
        }
        for (size_t m = 0; m < members.size(); ++m) out.states[members[m]].gc = best[m];
    }
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
        detail::maximise_signatures(structure, current, counts, freeze, leader, out);
        if (!structure.states.front().has_gc) return out;
        std::vector<WindowGC> unconstrained(P);
        for (size_t s = 0; s < P; ++s) {
            unconstrained[s] = current.states[s].gc;
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
            unconstrained[s] = gc;
            for (size_t u = 0; u < P; ++u)
                if (leader[u] == static_cast<int>(s)) out.states[u].gc = gc;
        }
        maximise_ordered_window_states(structure, current, counts, freeze, unconstrained, out);
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
        if (structure.windowed() && structure.states[s].has_gc)
            k += 2;  // the beta-binomial's mean and dispersion
        // the signature's Dirichlet parameters: 4 per context
        k += 4 * static_cast<int64_t>(structure.states[s].signature.mean.size());
        for (const auto& row : structure.states[s].emissions) k += dims(row.begin(), row.end());
    }
    return k;
}

}  // namespace tidemark
