// Window-level emissions: the beta-binomial G+C count of fixed windows (profiles with a window
// size), and the adapter that maps window posteriors onto bases for the base-level sinks.
#pragma once

#include <array>
#include <cstdint>
#include <memory>
#include <vector>

#include "tidemark/decode.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {

/// What a window holds: its G+C count, its known (A, C, G, T) bases and, for models with a
/// signature, the counts of its k-mers (4^k, indexed by code, oldest base most significant).
struct WindowCount {
    int64_t gc = 0;
    int64_t known = 0;
    std::vector<uint32_t> kmers;  ///< empty when the model has no signature
};

/// Counts of window `pos` of a contig under a window model (bases [pos w, min((pos+1) w, L))),
/// k-mers included when the model has a signature.
WindowCount window_count(const Model& model, const Contig& contig, int64_t pos);

/// Adds the k-mers of bases[0, n) made of k consecutive known bases to counts (4^k entries): the
/// chain of a window starts at the window's first base and restarts after an unknown base.
void count_kmers(const uint8_t* bases, int64_t n, int k, uint32_t* counts);

/// The code of the reverse complement of k-mer `code` (2 bits per base, A<C<G<T).
uint32_t reverse_complement_kmer(uint32_t code, int k);

/// Natural log of the Polya (Dirichlet-multinomial) probability of the window's sequence on one
/// strand given its k-mer counts, summed over the contexts: sum_c [lgamma(A_c) -
/// lgamma(A_c + n_c) + sum_b (lgamma(a_cb + n_cb) - lgamma(a_cb))], alpha as Model::sig_alpha
/// (4^k values). The bases that start a chain are not included (see signature_log_probability).
double signature_log_kernel(const double* alpha, int k, const uint32_t* counts);

/// Natural log of the probability of a window's known bases under state s's signature: the
/// average of the forward and reverse-complement kernels (the strand is a fair coin), plus
/// ln(1/4) for each known base that starts a chain (known - sum of the k-mer counts).
double signature_log_probability(const Model& model, int s, const WindowCount& w);

/// True when a window's counts are evidence under the model: at least one known base and at
/// least model.window_min_known of them. Other windows emit 1 in every state (decoding) and add
/// no statistics (training): a contig of a few hundred bases then stays at what its neighbours
/// and the prior support instead of being called from a sliver of a window.
inline bool window_has_evidence(const Model& model, const WindowCount& w) {
    return w.known > 0 && w.known >= model.window_min_known;
}

/// log B(k + alpha, n - k + beta) - log B(alpha, beta): the beta-binomial log probability of k
/// among n without the binomial coefficient, accurate also for the large alpha + beta of small
/// dispersions (the same arithmetic as window_log_probability). Training maximises sums of it.
double beta_binomial_log_kernel(double alpha, double beta, int64_t k, int64_t n);

/// Natural log of the beta-binomial probability of k G+C among n known bases in compiled state s
/// (with the binomial coefficient, so it is a distribution over k). n = 0 gives 0 (probability 1).
double window_log_probability(const Model& model, int s, int64_t k, int64_t n);

/// Natural-log emission rows of windows [first, first+count) (row-major count x S): the
/// window_log_probability of every state, 0 for a window without evidence; known[t] as below. The
/// decoders run on these: one window's states can differ by thousands of nats, beyond the range
/// of scaled probabilities.
void fill_window_log_emissions(const Model& model, const Contig& contig, int64_t first,
                               int64_t count, uint8_t* known, double* log_emission);

/// Emission rows of windows [first, first+count) (row-major count x S), each divided by its
/// largest entry so that none underflows; known[t] is 0 for a window with evidence
/// (window_has_evidence) and base_unknown for one without (whose row is all ones). Returns the
/// natural log of the factors divided out (add it to the log-likelihood).
double fill_window_emissions(const Model& model, const Contig& contig, int64_t first, int64_t count,
                             uint8_t* known, double* emission);

/// The counts behind a dinucleotide signature: the known bases and the pairs of adjacent known
/// bases of a stretch (index 4 x first + second, A<C<G<T), on the given strand.
struct DinucleotideCounts {
    std::array<int64_t, 4> bases{};
    std::array<int64_t, 16> pairs{};
    DinucleotideCounts& operator+=(const DinucleotideCounts& o);
};

/// Counts of bases [begin, end) of a contig (a pair needs both its bases inside the stretch).
DinucleotideCounts dinucleotide_counts(const Contig& contig, int64_t begin, int64_t end);

/// The distance between two stretches' dinucleotide relative abundances, delta* of Karlin &
/// Burge (1995), "Dinucleotide relative abundance extremes: a genomic signature", Trends Genet.
/// 11:283-290: (1/16) sum over the 16 dinucleotides XY of |rho*_XY(a) - rho*_XY(b)|, where
/// rho*_XY = f*_XY / (f*_X f*_Y) with the frequencies f* of the stretch and its reverse
/// complement together (both strands: f*_X = (n_X + n_X') / 2N, f*_XY = (n_XY + n_Y'X') / 2M,
/// ' the complement, N known bases, M pairs). NaN when a stretch has no pair or lacks a base
/// together with its complement (rho* undefined).
double signature_distance(const DinucleotideCounts& a, const DinucleotideCounts& b);

/// How well single bases fit each region of a window model: the one definition the caller uses
/// to move a call's end from the window grid to a base (calling.refine_ends; IntervalCaller in
/// call.hpp). A window emission scores a window's counts; this scores a base under the same
/// class, so that the most likely change point between two classes can be found base by base.
/// Today's term is the G+C one: log P(base) under independent bases with the region's GC mean
/// (P(C) = P(G) = gc/2, P(A) = P(T) = (1 - gc)/2; the beta-binomial's overdispersion describes
/// windows, not bases, and is left out). A region of several profile states takes the mean of
/// their GC means.
/// A signature (states[].signature) is not scored base by base: its states differ mostly in
/// their concentration, not their mean (the atypical class is the genome's mean with a low
/// concentration), so under the mean chain a base tells the classes apart hardly at all. The
/// two stretches on either side of a split are scored as window emissions are: each stretch's
/// k-mers (those ending in it whose k - 1 predecessors are known, the context taken from the
/// contig) as one Polya draw per strand, the strand a fair coin per stretch, times the
/// stretch's beta-binomial G+C sequence probability when the states have a G+C term; bases
/// that start a chain score ln(1/4) under every class and are left out. A region of several
/// states scores the equal mixture of their stretch likelihoods, ln(mean_s e^L_s) (the window
/// posterior says which of its states holds a window, not which holds the stretch).
class ClassBaseScores {
public:
    explicit ClassBaseScores(const Model& window_model);
    int64_t window() const { return window_; }
    int regions() const { return regions_; }
    /// out[i] = score(left, base) - score(right, base) for the bases [begin, end) of the contig
    /// (the log-likelihood ratio of the base under class `left` against class `right`); 0 for
    /// an unknown base, which emits 1 in every class.
    void difference(const Contig& contig, int64_t begin, int64_t end, int left, int right,
                    double* out) const;
    /// The score of one known base (0..3) under region r (natural log).
    double score(int r, uint8_t base) const { return log_base_[static_cast<size_t>(r) * 4 + base]; }
    /// The signature's k (0: the G+C term only).
    int signature_k() const { return k_; }
    /// Models with a signature: out[j] (j = 0..end-begin) = the log-likelihood of bases
    /// [begin, begin + j) as one stretch of class `left` plus that of [begin + j, end) as one of
    /// class `right`, each stretch scored as a window emission is (below).
    void split_scores(const Contig& contig, int64_t begin, int64_t end, int left, int right,
                      double* out, int64_t left_from = -1, int64_t right_to = -1) const;
    /// Which side of a split holds the call whose end is moved, when only one side does (the
    /// other is a class outside any call): `left` for a call's end, `right` for its start.
    enum class CallSide { both, left, right };
    /// Models with a signature: the log-likelihood (natural log) by which a split must beat
    /// the window grid's end, `prefer`, for an end of a call to leave it (change_point; how it
    /// was chosen: window.cpp).
    static constexpr double move_margin = 35;
    /// The split of bases [begin, end) between class `left` and class `right` (offset from
    /// begin, 0..end-begin) that the calls' ends move to: without a signature,
    /// best_change_point over difference(); with one, the largest split_scores (among equals,
    /// the nearest to `prefer`, then the smaller) when calls lie on both sides or `call` is
    /// `both` (each split lengthens one call as it shortens the other). With a call on one side
    /// only, the end stays at `prefer` unless the evidence is strong: the best split that does
    /// not shorten the call (`prefer` itself or one outside the call) is taken if it beats
    /// `prefer` by more than move_margin; a split that shortens the call (call left: below
    /// `prefer`; call right: above it) replaces it only if it beats that one by more than
    /// move_margin in turn.
    int64_t change_point(const Contig& contig, int64_t begin, int64_t end, int left, int right,
                         int64_t prefer, int64_t left_from = -1, int64_t right_to = -1,
                         CallSide call = CallSide::both) const;

private:
    struct Member {  // one profile state of a region (models with a signature)
        double gc_alpha = 0, gc_beta = 0;
        std::vector<double> alpha;          ///< 4^k Dirichlet parameters (Model::sig_alpha)
        std::vector<double> context_total;  ///< 4^(k-1) sums of a context's parameters
    };
    int64_t window_ = 0;
    int regions_ = 0;
    int k_ = 0;
    bool gc_ = true;
    std::vector<double> log_base_;  ///< [region * 4 + base]
    std::vector<std::vector<Member>> members_;
};

/// The model that base-level sinks see for a window model: one state per region (the region's
/// posterior), with the window model's names, colours and report flags; with the regions'
/// ClassBaseScores when the model's calls have their ends refined (Model::refine_ends).
Model region_view(const Model& model);

/// Receives a window model's blocks (one position per window) and hands the base-level sink the
/// same posteriors base by base, summed per region (the sink is built on region_view(model)):
/// calls, tracks and summaries then work on windows unchanged. Forkable when the sink is.
class WindowExpander final : public DecodeSink {
public:
    WindowExpander(const Model& window_model, DecodeSink& base_sink);
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig& contig, const DecodeResult& result) override;
    std::unique_ptr<DecodeSink> fork() const override;
    void join(DecodeSink& later) override;

private:
    const Model& model_;
    DecodeSink& sink_;
    std::unique_ptr<DecodeSink> owned_;  ///< a fork's own sink
    const Contig* contig_ = nullptr;
    std::vector<uint8_t> bases_;
    std::vector<double> posterior_;
};

}  // namespace tidemark
