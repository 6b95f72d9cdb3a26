// Comparison: scoring called intervals against a truth set, per region type, at base and
// interval level, as an aligned table and as JSON.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "tidemark/intervals.hpp"
#include "tidemark/log.hpp"

namespace tidemark {

/// Sequence lengths, for the true-negative count.
struct ChromSize {
    std::string name;
    int64_t length = 0;
};

struct Genome {
    std::string path;  ///< as given, for messages
    std::vector<ChromSize> chroms;
};

/// Reads chromosome sizes from a "NAME<tab or space>LENGTH[...]" text file (UCSC chrom.sizes,
/// or a samtools .fai index, whose first two columns are these) or from a FASTA file, which is
/// read through (use its .fai for speed). Throws InputError naming file and line for a
/// malformed line, a negative or non-integer length, or a duplicate name.
Genome read_genome(const std::string& path);

/// An interval file as read, with the path used in messages.
struct IntervalSet {
    std::string path;
    std::vector<Interval> intervals;
};

struct CompareOptions {
    std::string name;                ///< non-empty: every interval of both files has this type
    std::vector<std::string> types;  ///< only these types, in this order (empty = all, sorted)
};

/// Base-level counts and ratios for one type. Ratios with a zero denominator are NaN.
struct BaseMetrics {
    int64_t tp = 0;                  ///< bases in a call and in the truth
    int64_t fp = 0;                  ///< bases in a call only
    int64_t fn = 0;                  ///< bases in the truth only
    std::optional<int64_t> tn;       ///< bases in neither (needs a genome)
    double precision = 0;            ///< tp / (tp + fp)
    double recall = 0;               ///< tp / (tp + fn)
    double f1 = 0;                   ///< 2 tp / (2 tp + fp + fn)
    double jaccard = 0;              ///< tp / (tp + fp + fn)
    std::optional<double> accuracy;  ///< (tp + tn) / genome bases (needs a genome)
};

/// Interval-level counts for one type. "Reciprocal" means an overlap of at least half of both
/// intervals' lengths (2 * overlap >= length of each).
struct IntervalMetrics {
    int64_t truth = 0;              ///< truth intervals (after merging)
    int64_t calls = 0;              ///< calls (after merging)
    int64_t truth_overlapped = 0;   ///< truth intervals overlapped by at least one call
    int64_t truth_reciprocal = 0;   ///< truth intervals with a reciprocal call
    int64_t calls_overlapping = 0;  ///< calls overlapping at least one truth interval
    int64_t calls_reciprocal = 0;   ///< calls with a reciprocal truth interval
    /// Matched pairs: a truth interval and a call that overlap reciprocally. Intervals are
    /// merged first (disjoint, not touching), so each has at most one reciprocal partner and
    /// there are truth_reciprocal (= calls_reciprocal) pairs.
    double median_start_offset = 0;  ///< median |call start - truth start|; NaN when no pair
    double median_end_offset = 0;    ///< median |call end - truth end|; NaN when no pair
};

struct TypeComparison {
    std::string type;
    BaseMetrics base;
    IntervalMetrics intervals;
};

/// What normalising one file did (intervals of one type are sorted and those that overlap or
/// touch are merged before scoring, as bases either belong to a type or not).
struct FileNormalisation {
    std::string path;
    int64_t intervals = 0;  ///< records read
    int64_t empty = 0;      ///< zero-length records, ignored
    int64_t merged = 0;     ///< records absorbed into another of the same type
    bool sorted = true;     ///< false when records of a contig were out of start order
};

struct Comparison {
    std::vector<TypeComparison> types;
    FileNormalisation calls, truth;
    std::optional<Genome> genome;
    std::optional<int64_t> genome_bases;
};

/// Scores calls against truth. Contigs present in only one file count fully as FP or FN.
/// Throws InputError naming file and line for an interval without a type (column 4) when
/// options.name is empty, and, with a genome, for an interval on a contig the genome lacks or
/// extending beyond its length. Work O(n log n) in the number of intervals.
Comparison compare_intervals(const IntervalSet& calls, const IntervalSet& truth,
                             const CompareOptions& options, const std::optional<Genome>& genome);

/// Aligned text tables (base level, then interval level); ratios with 4 decimals, NA when
/// undefined.
std::string compare_table(const Comparison& comparison);

/// JSON (tidemark-compare/1) with the same numbers; undefined values are null.
std::string compare_json(const Comparison& comparison, const std::string& command_line);

/// The `tidemark compare` job.
struct CompareJob {
    std::string calls;         ///< BED3+ of calls ("-" = stdin)
    std::string truth;         ///< BED3+ of truth
    std::string genome;        ///< chrom sizes / .fai / FASTA; "" = none (no TN)
    std::string json;          ///< JSON output; "" = none
    std::string output = "-";  ///< text table
    CompareOptions options;
    std::string command_line;
};

/// Reads, scores, writes the table and JSON; notes on stderr what normalisation did.
Comparison run_compare(const CompareJob& job, const Logger& log);

}  // namespace tidemark
