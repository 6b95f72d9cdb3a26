// Model choice: fit templates with a range of class counts and pick the lowest BIC.
#include <fmt/format.h>

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
