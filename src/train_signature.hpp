// Internal: the M-step of window signatures (train_signature.cpp), called by maximise
// (train_mstep.cpp), and the digamma function and line search the two share.
#pragma once

#include <cmath>
#include <vector>

#include "tidemark/train.hpp"

namespace tidemark::detail {

/// Digamma function (train_mstep.cpp).
double digamma(double x);

/// Golden-section search for the maximum of f on [lo, hi] (unimodal f), to width tol.
template <class F>
double golden_max(F f, double lo, double hi, double tol) {
    const double r = (std::sqrt(5.0) - 1) / 2;
    double a = lo, b = hi;
    double x1 = b - r * (b - a), x2 = a + r * (b - a);
    double f1 = f(x1), f2 = f(x2);
    while (b - a > tol) {
        if (f1 < f2) {
            a = x1;
            x1 = x2;
            f1 = f2;
            x2 = a + r * (b - a);
            f2 = f(x2);
        } else {
            b = x2;
            x2 = x1;
            f2 = f1;
            x1 = b - r * (b - a);
            f1 = f(x1);
        }
    }
    return f1 < f2 ? x2 : x1;
}

/// Re-estimates the signature (Dirichlet parameters per context) of every unfrozen tie-group
/// leader of a signature profile from counts.windows, and copies it to the group's members;
/// concentration_below holds context by context. Q never decreases (see the .cpp file).
void maximise_signatures(const Profile& structure, const Profile& current,
                         const TrainingCounts& counts, const FreezeMask& freeze,
                         const std::vector<int>& leader, Profile& out);

}  // namespace tidemark::detail
