// Screening whole contigs for a composition foreign to the genome a profile was fitted to: the
// contamination check of a draft assembly before submission. A window model judges windows one
// at a time against classes fitted to the whole genome; a foreign contig with the host's G+C and
// a signature of its own (another donor than the atypical classes learned) then looks like the
// genome's own heterogeneity, window by window. Over a whole contig the same departure adds up,
// and the genome's own stretches of the same length say how far is still the genome's own.
#pragma once

#include <array>
#include <cstdint>

#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {

class TrainingData;

/// Trinucleotide counts of a stretch, both strands pooled: n[16x + 4y + z] counts xyz (codes
/// A C G T = 0..3) on the given strand plus its reverse complement's, over every three
/// consecutive known bases.
struct TrinucleotideCounts {
    std::array<int64_t, 64> n{};
    int64_t known = 0;  ///< known bases of the stretch
};

/// Counts of bases [begin, end) of a contig.
TrinucleotideCounts trinucleotide_counts(const Contig& contig, int64_t begin, int64_t end);

/// Dimensions of the signature: the 32 trinucleotides that are not the reverse complement of
/// one with a smaller code (no trinucleotide is its own reverse complement).
inline constexpr int screen_dimensions = 32;

/// Trinucleotide relative abundances: per trinucleotide xyz (in increasing code order of the
/// 32 kept), ln(f(xyz) f(y) / (f(xy.) f(.yz))), the log ratio of its frequency to its
/// expectation from the dinucleotides (a first-order Markov chain fitted to the same bases;
/// the construction of Karlin & Burge 1995's rho*_XY one order higher, "Dinucleotide relative
/// abundance extremes: a genomic signature", Trends Genet. 11:283-290). Frequencies below 1e-9
/// (products below 1e-12) are taken at that floor.
std::array<double, screen_dimensions> trinucleotide_signature(const TrinucleotideCounts& counts);

/// Rules of the screen (tidemark's choices unless cited; README, "Contig screen").
struct ContigScreenRule {
    /// Contigs and the genome's stretches are judged from this many known bases on (one window
    /// of the islands templates: below it a contig carries no more evidence than one window).
    static constexpr int64_t min_known = 5000;
    /// The lengths at which the genome's own stretches are measured; a contig between two is
    /// judged by log-log interpolation, outside them by the nearest.
    static constexpr std::array<int64_t, 5> lengths = {5000, 10000, 20000, 50000, 100000};
    /// A length enters the table only with at least this many of the genome's stretches.
    static constexpr int64_t min_stretches = 10;
    /// Robust centre and spread: five rounds of dropping the 5-kb stretches beyond the 0.975
    /// quantile of chi-square (32 df), scaled to the median distance, and re-estimating from
    /// the rest (a reweighting step as in robust covariance estimation; common practice).
    static constexpr int rounds = 5;
    static constexpr double chi2_32_q975 = 49.48043774297169;  ///< scipy.stats.chi2.ppf(0.975, 32)
    static constexpr double chi2_32_median = 31.335859088634486;  ///< scipy.stats.chi2.median(32)
    /// Tail probability of the limits: a contig is foreign when its distance exceeds the
    /// chi-square (32 df) quantile 1 - 1e-6 scaled to the median distance of the genome's
    /// stretches of its length. Chosen on a training draft only (README, "Contig screen").
    static constexpr double level = 1e-6;
    static constexpr double chi2_32_isf_level = 85.23155071709897;  ///< chi2.isf(1e-6, 32)
};

/// Squared Mahalanobis distance of a stretch's signature from the screen's centre.
double screen_distance(const ContigScreen& screen, const TrinucleotideCounts& counts);

/// The largest distance still the genome's own for a stretch of `known` known bases; NaN below
/// ContigScreenRule::min_known.
double screen_limit(const ContigScreen& screen, int64_t known);

/// Fits the screen to the training data (one pass): centre and precision from the genome's 5-kb
/// stretches (ContigScreenRule), limits from its stretches of every length in the table. Empty
/// (present() false) when the genome has fewer than min_stretches stretches of 5 kb or their
/// spread is singular (too few stretches for the 32 values, e.g. fewer than 33).
ContigScreen fit_contig_screen(TrainingData& data);

}  // namespace tidemark
