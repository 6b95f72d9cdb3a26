// Internal: the M-step of window signatures (train_signature.cpp), called by maximise
// (train_mstep.cpp), and the digamma function the two share.
#pragma once

#include <vector>

#include "tidemark/train.hpp"

namespace tidemark::detail {

/// Digamma function (train_mstep.cpp).
double digamma(double x);

/// Re-estimates the signature (Dirichlet parameters per context) of every unfrozen tie-group
/// leader of a signature profile from counts.windows, and copies it to the group's members;
/// concentration_below holds context by context. Q never decreases (see the .cpp file).
void maximise_signatures(const Profile& structure, const Profile& current,
                         const TrainingCounts& counts, const FreezeMask& freeze,
                         const std::vector<int>& leader, Profile& out);

}  // namespace tidemark::detail
