// Calling intervals: maximal runs of high region posterior, merged, length-filtered, optionally
// post-filtered by published CpG-island criteria; plus the per-contig summary.
#pragma once

#include <cstdint>
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

/// True when a call of this length and composition meets the criteria.
bool meets_island_criteria(IslandCriteria criteria, int64_t length, const Composition& comp);

struct CallOptions {
    double min_posterior = 0.5;  ///< a base belongs to a run when P(region) >= this
    int64_t merge_gap = 0;       ///< runs separated by fewer than this many bases are merged
    int64_t min_length = 1;      ///< calls shorter than this are dropped (after merging)
    double high_posterior = 0.95;  ///< a call's core (BED thickStart/thickEnd) spans its bases
                                   ///< with P(region) >= this (tidemark's choice)
    IslandCriteria criteria = IslandCriteria::none;
};

/// One called interval (contig coordinates, 0-based half-open, before adding Contig::offset).
struct Call {
    int64_t begin = 0;
    int64_t end = 0;
    int region = 0;             ///< index into Model::region_names
    double mean_posterior = 0;  ///< mean P(region) over the interval (merged gaps included)
    double min_posterior = 0;   ///< lowest P(region) inside the interval
    int64_t core_begin = 0;     ///< first base with P >= high_posterior (= begin when none)
    int64_t core_end = 0;       ///< one past the last such base (= begin when none)
    Composition composition;
};

/// Sums state posteriors into region posteriors and calls intervals for every reportable
/// region. Calls of one contig are available after end_contig, sorted by start, end, region.
class IntervalCaller final : public DecodeSink {
public:
    IntervalCaller(const Model& model, CallOptions options);
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig& contig, const DecodeResult& result) override;
    const std::vector<Call>& calls() const { return calls_; }

private:
    struct Open {  // the call being extended for one region
        bool active = false;
        int64_t begin = 0, end = 0;  ///< end = one past the last base with P >= threshold
        double sum = 0;              ///< posterior sum over [begin, end)
        double min = 1;
        double gap_sum = 0, gap_min = 1;  ///< over [end, current position)
        int64_t core_begin = -1, core_end = -1;
    };
    void close(Open& open, int region);

    const Model& model_;
    CallOptions options_;
    const Contig* contig_ = nullptr;
    std::vector<int> reported_;  ///< region indices that are reportable
    std::vector<Open> open_;
    std::vector<Call> calls_;
};

}  // namespace tidemark
