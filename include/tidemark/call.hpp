// Calling intervals: maximal runs of high region posterior, merged, length-filtered, optionally
// post-filtered by published CpG-island criteria. The caller is a forkable sink whose state over
// a span can be saved and restored, so that calls join across segments (threads) and across the
// pieces of a split record (merge). Per-contig totals are in summary.hpp.
#pragma once

#include <cstdint>
#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "tidemark/decode.hpp"

namespace tidemark {

/// Published CpG-island thresholds applied after calling.
enum class IslandCriteria {
    none,
    ggf1987,  ///< Gardiner-Garden & Frommer (1987), J. Mol. Biol. 196:261-282:
              ///< length >= 200 bp, GC > 0.5, o/e > 0.6
    tj2002,   ///< Takai & Jones (2002), PNAS 99:3740-3745: length > 500 bp, GC >= 0.55, o/e >= 0.65
};

/// Parses "none", "ggf1987" or "tj2002"; throws UsageError otherwise.
IslandCriteria parse_island_criteria(const std::string& text);

/// The region type the island criteria apply to; calls of other types are never filtered by them.
inline constexpr const char* island_region_name = "cpg_island";

/// True when a call of this length and composition meets the criteria.
bool meets_island_criteria(IslandCriteria criteria, int64_t length, const Composition& comp);

struct CallOptions {
    double min_posterior = 0.5;    ///< a base belongs to a run when P(region) >= this
    int64_t merge_gap = 0;         ///< runs separated by fewer than this many bases are merged
    int64_t min_length = 1;        ///< calls shorter than this are dropped (after merging)
    double high_posterior = 0.95;  ///< a call's core (BED thickStart/thickEnd) spans its bases
                                   ///< with P(region) >= this (tidemark's choice)
    IslandCriteria criteria = IslandCriteria::none;
};

/// One called interval (contig coordinates, 0-based half-open, before adding Contig::offset).
struct Call {
    int64_t begin = 0;
    int64_t end = 0;
    int region = 0;               ///< index into Model::region_names
    double mean_posterior = 0;    ///< mean P(region) over the interval (merged gaps included)
    double min_posterior = 0;     ///< lowest P(region) inside the interval
    int64_t confident_bases = 0;  ///< bases with P(region) >= CallOptions::high_posterior (and
                                  ///< >= min_posterior)
    int64_t core_begin = 0;       ///< first base with P >= high_posterior (= begin when none)
    int64_t core_end = 0;         ///< one past the last such base (= begin when none)
    Composition composition;
    /// Window profiles with a signature (Model::signature_evidence): delta*, the dinucleotide
    /// relative-abundance distance (window.hpp: signature_distance) between the call's bases
    /// and those of its whole record, both strands; NaN otherwise or where undefined.
    double signature_distance = std::numeric_limits<double>::quiet_NaN();

    /// Share of the call's bases at or above the core level (high_posterior): how much of the
    /// call is confidently of its region type (BED column `confident_fraction`).
    double confident_fraction() const {
        return end > begin ? static_cast<double>(confident_bases) / static_cast<double>(end - begin)
                           : 0.0;
    }
};

/// The most likely change point of n bases whose left part belongs to one class and right part
/// to another, given diff[i] = the left class's per-base log-score minus the right one's: the
/// split k in [0, n] (bases [0, k) left, [k, n) right) that maximises the log-likelihood, i.e.
/// the prefix sum diff[0] + ... + diff[k-1] (summed in that order; k = 0 gives 0). Among equal
/// sums, the k nearest to `prefer`, then the smaller. O(n), one pass.
int64_t best_change_point(const double* diff, int64_t n, int64_t prefer);

/// Sums state posteriors into region posteriors and calls intervals for every reportable
/// region. Calls of one contig are available after end_contig, sorted by start, end, region.
/// Assembly gaps (sequence.hpp: runs of at least assembly_gap_min_length unknown bases) split
/// calls: their bases belong to no call and no merge reaches across one, so the parts on each
/// side are calls of their own, each judged alone (minimum length, island criteria).
///
/// Forkable: a fork decodes a later span. A fork that saw a whole contig (end_contig) replaces
/// this caller's state on join, as if this caller had decoded that contig. A fork that saw a
/// later segment of the contig in progress is appended: per region, a span keeps the first
/// group of runs (which may still merge with the span before it), the open last group with the
/// posterior sum and minimum of the gap after it, and the posterior sum and minimum before its
/// first run; groups in between are final and already calls. Joining merges the last group
/// before the seam with the first after it when the gap between them is short, so the calls
/// are those of one sequential pass (means may differ in the last bits: sums are added in
/// another order).
///
/// Ends refined at base resolution (window models with calling.refine_ends: the model carries
/// ClassBaseScores, window.hpp): at end_contig, every call end on the window grid that lies
/// between two classes, with known bases on both sides (not a contig end, not beside an
/// unknown base, so never an end made by an assembly gap), moves to the best_change_point
/// between the class on its left and the class on its right, searched over the window before
/// and the window after it (stopping at assembly gaps and halfway to the next call end, so
/// calls keep their order and at least one base; with a signature, the stretch each side of a
/// split is scored as one draw that reaches 4 windows further, within the same limits, see
/// ClassBaseScores::split_scores, and an end with a call on one side only leaves the grid only
/// for a split that beats it by more than ClassBaseScores::move_margin, moving into the call
/// only if that split also beats the best one outside it by as much, see
/// ClassBaseScores::change_point). The class outside a call is the call of
/// another region that meets it there, else the other region most probable in the window just
/// outside. The calls of one contig are refined together from its own bases and window
/// posteriors, after the whole contig is decoded, so they do not depend on threads or shards
/// (window models are never split). A moved call's posterior columns give each base its
/// window's posterior, as the posterior tracks do: mean_posterior is the mean over the call's
/// bases, bases of a partial window counting with their window's value; confident_bases counts
/// the bases whose window is at or above both levels; the core spans the first to the last
/// such base inside the call; min_length and the island criteria judged the call before it
/// moved.
class IntervalCaller final : public DecodeSink {
public:
    IntervalCaller(const Model& model, CallOptions options);
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig& contig, const DecodeResult& result) override;
    std::unique_ptr<DecodeSink> fork() const override;
    void join(DecodeSink& later) override;
    const std::vector<Call>& calls() const { return calls_; }

    /// A fork's state after one segment, in plain form: scan --shard writes it for segments of a
    /// contig shared between shards, and merge restores it (restore_span) and joins the spans
    /// in order, as the single run does.
    struct Group {                   // merged runs of one region
        int64_t begin = 0, end = 0;  ///< end = one past the last base with P >= threshold
        double sum = 0;              ///< posterior sum over [begin, end)
        double min = 1;
        int64_t core_begin = -1, core_end = -1;
        int64_t confident = 0;  ///< bases with P >= high_posterior
    };
    struct Lane {                // one reportable region's state over the span seen so far
        bool seen = false;       ///< a run has started in this span
        bool has_first = false;  ///< the span's first group is closed and kept in `first`
        Group first;
        bool active = false;  ///< `open` is being extended
        Group open;
        double lead_sum = 0, lead_min = 1;  ///< before the span's first run (all of it if none)
        bool lead_gap = false;  ///< an assembly gap lies before the span's first run (or in it)
        double gap_sum = 0, gap_min = 1;  ///< over [open.end, current position)
    };
    const std::vector<Lane>& lanes() const { return lanes_; }
    /// Makes this caller a fork that saw one segment of the contig begun with begin_contig.
    void restore_span(std::vector<Lane> lanes, std::vector<Call> calls);
    /// Where calls get their composition when the contig's bases are not at hand (merge):
    /// composition of [begin, end).
    using CompositionSource = std::function<Composition(int64_t begin, int64_t end)>;
    void use_composition_source(CompositionSource source) {
        composition_source_ = std::move(source);
    }

private:
    void close(Lane& lane, int region);  ///< closes the open group
    /// The lane meets an assembly gap: the open group ends before it, nothing merges across.
    void meet_gap(Lane& lane, int region);
    void finish(const Group& group, int region);  ///< a final group: filter, then a call
    /// Moves the contig's call ends onto bases (see the class comment); call_ends.cpp.
    void refine_ends();
    /// A moved call's posterior columns from window_posteriors_.
    void posterior_columns(Call& call) const;

    const Model& model_;
    CallOptions options_;
    const Contig* contig_ = nullptr;
    bool ended_ = false;         ///< end_contig seen
    std::vector<int> reported_;  ///< region indices that are reportable
    std::vector<Lane> lanes_;
    std::vector<Call> calls_;
    std::vector<std::pair<int64_t, int64_t>> gaps_;  ///< of the current block
    /// With refined ends: every region's posterior per window of the contig so far
    /// ([window * regions + region]), read at each window's first base.
    std::vector<double> window_posteriors_;
    CompositionSource composition_source_;
};

}  // namespace tidemark
