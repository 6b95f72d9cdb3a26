// Baum-Welch driver: E-step, M-step and convergence per run, perturbed restarts, progress on
// stderr, and the guard that the EM objective never decreases.
#include <fmt/format.h>

#include <cmath>
#include <limits>

#include "rng.hpp"
#include "tidemark/error.hpp"
#include "tidemark/progress.hpp"
#include "tidemark/train.hpp"

namespace tidemark {
namespace {

// Restarts draw from the simulator's generator (xoshiro256** seeded by splitmix64, src/rng.hpp):
// fixed algorithms, so restarts are the same on every platform, unlike the std distributions.
class Random {
public:
    explicit Random(uint64_t seed) : gen_(seed) {}
    double uniform() { return static_cast<double>(gen_.next53()) * 0x1.0p-53; }

private:
    detail::Xoshiro256ss gen_;
};

template <class It>
void jitter(It begin, It end, Random& rng, double amount) {
    double total = 0;
    for (It it = begin; it != end; ++it) {
        if (*it > 0) *it *= std::exp(amount * (2 * rng.uniform() - 1));
        total += *it;
    }
    if (total > 0)
        for (It it = begin; it != end; ++it) *it /= total;
}

struct Run {
    Profile profile;
    double log_likelihood = 0;
    int iterations = 0;
    bool converged = false;
    TrainingCounts last;
};

Run em(const Profile& structure, Profile p, TrainingData& data, const FitOptions& o,
       const FreezeMask& freeze, int restart, std::vector<IterationRecord>& history,
       const Logger& log) {
    const MStepOptions mo{o.pseudocount};
    const std::string who =
        o.restarts > 1 ? fmt::format("restart {}/{}, ", restart + 1, o.restarts) : "";
    Run run;
    double prev_ll = 0, prev_obj = 0;
    // An iteration is the M-step that made p (none before the first) and the E-step on p.
    Stopwatch iteration;
    for (int it = 0;; ++it) {
        TrainingCounts c = expected_counts(p, data, o.block_size, o.threads);
        if (c.known == 0)
            throw InputError("the training sequences contain no known base (A, C, G or T)");
        const double ll = c.log_likelihood;
        const double obj = ll + log_prior(structure, p, freeze, o.pseudocount);
        const ResourceUsage spent = iteration.now();
        history.push_back({restart, it, ll, obj, spent.wall_seconds, spent.cpu_seconds});
        double rel = std::numeric_limits<double>::quiet_NaN();
        if (it > 0) {
            // EM (MAP-EM with pseudocounts) cannot decrease its objective; a decrease beyond
            // rounding means the counts or the update are wrong.
            if (obj < prev_obj - 1e-9 * std::max(1.0, std::abs(prev_obj)))
                throw InternalError(fmt::format(
                    "fit: the EM objective decreased from {:.10g} to {:.10g} at iteration {} "
                    "(log-likelihood {:.10g} -> {:.10g}); this is a bug in tidemark, please report "
                    "it",
                    prev_obj, obj, it, prev_ll, ll));
            rel = (ll - prev_ll) / std::max(std::abs(prev_ll), std::numeric_limits<double>::min());
        }
        log.info(fmt::format(
            "fit: {}iteration {}: log-likelihood {:.6f}, change {}, {:.2f} s wall, {:.2f} s CPU",
            who, it, ll, it > 0 ? fmt::format("{:+.3e}", rel) : std::string("-"),
            spent.wall_seconds, spent.cpu_seconds));
        run.profile = p;
        run.log_likelihood = ll;
        run.iterations = it;
        run.last = std::move(c);
        if (it > 0 && std::abs(rel) < o.tol) {
            run.converged = true;
            break;
        }
        if (it >= o.max_iter) break;
        iteration = Stopwatch();
        p = maximise(structure, p, run.last, freeze, mo);
        prev_ll = ll;
        prev_obj = obj;
    }
    return run;
}

}  // namespace

Profile perturb(const Profile& start, const FreezeMask& freeze, uint64_t seed, int restart,
                double amount) {
    Random rng(seed ^ (0xd1b54a32d192ed03ULL * static_cast<uint64_t>(restart + 1)));
    Profile p = start;
    if (!freeze.initial) jitter(p.initial.begin(), p.initial.end(), rng, amount);
    for (size_t s = 0; s < p.states.size(); ++s)
        if (!freeze.transitions[s])
            jitter(p.transitions[s].begin(), p.transitions[s].end(), rng, amount);
    for (size_t s = 0; s < p.states.size(); ++s) {
        if (freeze.emissions[s]) continue;
        size_t leader = s;
        if (!p.states[s].tie.empty())
            for (size_t u = 0; u < s; ++u)
                if (p.states[u].tie == p.states[s].tie) {
                    leader = u;
                    break;
                }
        if (leader != s) {
            p.states[s].emissions = p.states[leader].emissions;
            p.states[s].gc = p.states[leader].gc;
            p.states[s].signature = p.states[leader].signature;
            continue;
        }
        if (p.windowed()) {  // mean on the logit scale, dispersion on the log scale
            WindowGC& gc = p.states[s].gc;
            const double logit =
                std::log(gc.mean / (1 - gc.mean)) + amount * (2 * rng.uniform() - 1);
            gc.mean = 1 / (1 + std::exp(-logit));
            gc.dispersion =
                std::clamp(gc.dispersion * std::exp(amount * (2 * rng.uniform() - 1)), 1e-9, 0.5);
        }
        for (auto& row : p.states[s].emissions) jitter(row.begin(), row.end(), rng, amount);
    }
    // A restart must start where the M-step may go: an ordered state's mean is put back on its
    // side of its reference's (the M-step keeps it there, and EM's guarantee needs a start there).
    for (auto& st : p.states) {
        if (st.gc_reference.empty()) continue;
        const double bound = p.states[p.state_index(st.gc_reference)].gc.mean;
        if (st.gc_side * (st.gc.mean - bound) < 0) st.gc.mean = bound;
    }
    return p;
}

FitResult baum_welch(const Profile& start, TrainingData& data, const FitOptions& o,
                     const Logger& log) {
    if (o.restarts < 1) throw UsageError("--restarts must be at least 1");
    if (o.max_iter < 0) throw UsageError("--max-iter must be >= 0");
    if (!(o.tol >= 0)) throw UsageError("--tol must be >= 0");
    if (!(o.pseudocount >= 0) || !std::isfinite(o.pseudocount))
        throw UsageError("--pseudocount must be >= 0");
    const Stopwatch whole;
    const FreezeMask freeze = resolve_freeze(o.freeze, start);
    FitResult best;
    bool have = false;
    std::vector<double> lls;
    std::vector<IterationRecord> history;
    for (int r = 0; r < o.restarts; ++r) {
        const Profile p0 = r == 0 ? start : perturb(start, freeze, o.seed, r, o.perturbation);
        Run run = em(start, p0, data, o, freeze, r, history, log);
        lls.push_back(run.log_likelihood);
        if (!have || run.log_likelihood > best.log_likelihood) {
            have = true;
            best.profile = o.order_by_gc ? order_states_by_gc(run.profile, true) : run.profile;
            best.log_likelihood = run.log_likelihood;
            best.iterations = run.iterations;
            best.converged = run.converged;
            best.best_restart = r;
            best.known_bases = run.last.known;
            best.positions = run.last.positions;
            best.contigs = run.last.contigs;
            best.windows = static_cast<int64_t>(run.last.windows.size());
        }
    }
    if (o.restarts > 1)
        log.info(fmt::format("fit: kept restart {} of {} (log-likelihood {:.6f})",
                             best.best_restart + 1, o.restarts, best.log_likelihood));
    best.restart_log_likelihoods = std::move(lls);
    best.history = std::move(history);
    const ResourceUsage spent = whole.now();
    best.wall_seconds = spent.wall_seconds;
    best.cpu_seconds = spent.cpu_seconds;
    return best;
}

}  // namespace tidemark
