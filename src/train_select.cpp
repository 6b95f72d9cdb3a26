// Model choice: fit templates with a range of class counts and pick the lowest BIC.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "tidemark/error.hpp"
#include "tidemark/train.hpp"

namespace tidemark {

Selection select_classes(TrainingData& data, int lo, int hi, int order, const SeedOptions& seed,
                         const FitOptions& options, const Logger& log) {
    if (lo < 1 || hi < lo)
        throw UsageError(fmt::format("--classes {}..{} is not a range of class counts", lo, hi));
    Selection sel;
    for (int k = lo; k <= hi; ++k) {
        log.info(fmt::format("fit: {} class{}", k, k == 1 ? "" : "es"));
        const Profile start = class_template(data, k, order, seed);
        FitOptions o = options;
        o.order_by_gc = true;
        Candidate c;
        c.classes = k;
        c.fit = baum_welch(start, data, o, log);
        c.log_likelihood = c.fit.log_likelihood;
        c.parameters = free_parameters(start, resolve_freeze(o.freeze, start));
        // Schwarz (1978), "Estimating the dimension of a model", Ann. Statist. 6:461-464:
        // BIC = -2 ln L + k ln n, with n the number of observed (known) bases.
        c.bic = -2 * c.log_likelihood + static_cast<double>(c.parameters) *
                                            std::log(static_cast<double>(c.fit.known_bases));
        sel.candidates.push_back(std::move(c));
    }
    for (size_t i = 1; i < sel.candidates.size(); ++i)
        if (sel.candidates[i].bic < sel.candidates[sel.chosen].bic) sel.chosen = i;
    return sel;
}

Profile without_state(const Profile& p, int s) {
    const size_t P = p.states.size();
    if (s < 0 || static_cast<size_t>(s) >= P || P < 2)
        throw InternalError("without_state: no such state, or the last one");
    // A constrained class's heir is its reference (gc.below/above, signature.concentration_below).
    const std::string& reference = p.states[s].gc_reference.empty()
                                       ? p.states[s].signature.concentration_reference
                                       : p.states[s].gc_reference;
    const int heir = reference.empty() ? -1 : p.state_index(reference);
    Profile q = p;
    // Mass into s moves to its heir (or stays in the row's own state), before s is removed.
    for (size_t u = 0; u < P; ++u) {
        if (static_cast<int>(u) == s) continue;
        const size_t to = heir >= 0 ? static_cast<size_t>(heir) : u;
        q.transitions[u][to] += q.transitions[u][s];
    }
    if (heir >= 0) {
        q.initial[heir] += q.initial[s];
    } else {
        double rest = 0;
        for (size_t u = 0; u < P; ++u)
            if (static_cast<int>(u) != s) rest += q.initial[u];
        for (size_t u = 0; u < P; ++u) q.initial[u] = rest > 0 ? q.initial[u] / rest : 0;
    }
    q.states.erase(q.states.begin() + s);
    q.initial.erase(q.initial.begin() + s);
    q.transitions.erase(q.transitions.begin() + s);
    for (auto& row : q.transitions) row.erase(row.begin() + s);
    const int region = p.states[s].region;
    const bool shared = std::any_of(q.states.begin(), q.states.end(),
                                    [&](const StateSpec& st) { return st.region == region; });
    if (!shared) {
        q.regions.erase(q.regions.begin() + region);
        for (auto& st : q.states)
            if (st.region > region) --st.region;
    }
    return q;
}

FitResult drop_unsupported_classes(FitResult fitted, TrainingData& data, const FitOptions& options,
                                   const Logger& log) {
    const auto bic = [&](const FitResult& f) {
        const int64_t k = free_parameters(f.profile, resolve_freeze(options.freeze, f.profile));
        return -2 * f.log_likelihood +
               static_cast<double>(k) *
                   std::log(static_cast<double>(std::max<int64_t>(1, f.windows)));
    };
    for (;;) {
        const Profile& p = fitted.profile;
        // Only a reported (shifted or atypical) class is dropped: a constrained state of the
        // background, such as composition-shift's typical_broad, is the genome's own
        // heterogeneity, and without it ordinary windows would be left to the atypical class.
        std::vector<int> ordered;
        for (size_t s = 0; s < p.states.size(); ++s)
            if ((!p.states[s].gc_reference.empty() ||
                 !p.states[s].signature.concentration_reference.empty()) &&
                p.regions[static_cast<size_t>(p.states[s].region)].report)
                ordered.push_back(static_cast<int>(s));
        if (ordered.empty()) break;
        const double full = bic(fitted);
        int drop = -1;
        std::string why;
        FitResult kept;
        for (int s : ordered) {
            const StateSpec& st = p.states[s];
            if (st.gc_reference.empty()) continue;  // signature-constrained: BIC only
            const StateSpec& ref = p.states[p.state_index(st.gc_reference)];
            if (st.gc.mean != ref.gc.mean) continue;
            drop = s;
            why = fmt::format(
                "its fitted GC equals that of '{}': the genome gives it no GC {} '{}' (the order "
                "constraint is active)",
                ref.name, st.gc_side < 0 ? "below" : "above", ref.name);
            kept = baum_welch(without_state(p, s), data, options, log);
            break;
        }
        if (drop < 0) {
            double best = full;
            for (int s : ordered) {
                FitResult r = baum_welch(without_state(p, s), data, options, log);
                const double b = bic(r);
                if (b < best) {
                    best = b;
                    drop = s;
                    why = fmt::format(
                        "BIC {:.2f} without it, {:.2f} with it (-2 ln L + k ln n over {} windows)",
                        b, full, fitted.windows);
                    kept = std::move(r);
                }
            }
        }
        if (drop < 0) break;
        const std::string note = fmt::format("class '{}' (GC {:.4f}) dropped: {}",
                                             p.states[drop].name, state_gc(p.states[drop]), why);
        log.info("fit: " + note);
        std::vector<std::string> dropped = std::move(fitted.dropped);
        dropped.push_back(note);
        fitted = std::move(kept);
        fitted.dropped = std::move(dropped);
    }
    return fitted;
}

std::string selection_table(const Selection& sel) {
    std::string out = fmt::format("{:>7}  {:>20}  {:>10}  {:>20}\n", "classes", "log_likelihood",
                                  "parameters", "BIC");
    for (size_t i = 0; i < sel.candidates.size(); ++i) {
        const Candidate& c = sel.candidates[i];
        out += fmt::format("{:>7}  {:>20.4f}  {:>10}  {:>20.4f}{}\n", c.classes, c.log_likelihood,
                           c.parameters, c.bic, i == sel.chosen ? "  <- lowest BIC" : "");
    }
    return out;
}

}  // namespace tidemark
