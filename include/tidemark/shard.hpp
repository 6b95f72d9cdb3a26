// Sharding: a deterministic, length-balanced share of the input records for one of N
// independent processes (scan --shard, fit --emit-stats), and the exact per-contig record that
// `tidemark merge` reads back to rebuild a single run's outputs.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "tidemark/sequence.hpp"
#include "tidemark/summary.hpp"

namespace tidemark {

/// Shard I of N (1-based). count 0 means "no sharding": everything is decoded.
struct ShardSpec {
    int index = 0;  ///< 1..count
    int count = 0;  ///< 0 = not sharded
    bool active() const { return count > 0; }
};

/// Parses "I/N" with 1 <= I <= N <= 100000. Throws UsageError naming the text.
ShardSpec parse_shard(const std::string& text);

/// One unit of work: a FASTA record (whole-file input) or one resolved region.
struct ShardUnit {
    std::string input;  ///< the file it comes from
    std::string name;
    int64_t length = 0;
};

/// The units of an input in input order, with their lengths. With regions, the resolved regions
/// of inputs[0]. Otherwise every record of every file: lengths from FILE.fai when it is at least
/// as new as FILE, else from an index built beside the file (plain FASTA or bgzip; built under a
/// temporary name and renamed, so that concurrent shards never see half an index), else (plain
/// gzip, xz, bzip2, zstd, unequal line lengths, read-only folder) from one pass over the records.
/// Throws UsageError for standard input (it cannot be read twice), InputError for bad files.
std::vector<ShardUnit> list_units(const std::vector<std::string>& inputs,
                                  const std::vector<Region>& regions);

/// Greedy longest-first assignment (Graham 1969, "Bounds on multiprocessing timing anomalies",
/// SIAM J. Appl. Math. 17:416-429: the largest load is at most 4/3 - 1/(3N) times the best
/// possible): units by decreasing length, ties by input order, each to the shard with the
/// smallest load so far, ties by the lower shard. Returns the 0-based shard of every unit.
/// Deterministic: depends only on the lengths and N. Contigs are never split.
std::vector<int> assign_shards(const std::vector<int64_t>& lengths, int count);

/// Decides, record by record as a reader yields them, which records belong to this shard, and
/// checks that the records are those the plan was made from (so that stale indexes cannot make
/// shards overlap or miss records). Empty records, which faidx leaves out, go to shard 1.
class ShardFilter {
public:
    /// Not active: every record is taken (input indexes are still counted).
    ShardFilter() = default;
    ShardFilter(ShardSpec spec, const std::vector<std::string>& inputs,
                const std::vector<Region>& regions);

    /// Advances to the next record; true when it belongs to this shard. Throws InputError when
    /// the record is not the one planned (name differs, or more records than planned).
    bool take(const Contig& contig);
    /// 0-based input index of the record last passed to take().
    int64_t index() const { return next_ - 1; }
    /// Throws InputError when fewer records were read than planned.
    void finish() const;
    /// Records passed to take() so far: after a whole pass, the records of the input (empty
    /// records included, which faidx does not list).
    int64_t records() const { return next_; }

    const ShardSpec& spec() const { return spec_; }
    /// Planned units (non-empty records, or regions).
    int64_t units() const { return static_cast<int64_t>(units_.size()); }
    /// Bases (known and unknown) planned for this shard, and for the whole input.
    int64_t shard_bases() const { return shard_bases_; }
    int64_t total_bases() const { return total_bases_; }

private:
    ShardSpec spec_;
    std::vector<ShardUnit> units_;
    std::vector<int> shard_of_;
    int64_t next_ = 0;    ///< records seen
    size_t planned_ = 0;  ///< planned units seen
    int64_t shard_bases_ = 0, total_bases_ = 0;
};

/// The "shard" object of a shard's summary and report: index, count, records of the whole input,
/// the effective options (a JSON object, so that merge can refuse shards of different runs even
/// from summaries), and every ContigSummary field of this shard's contigs at full precision
/// (what merge needs to rebuild the genome-wide totals exactly). Returned as JSON text.
std::string shard_json(const ShardFilter& filter, const std::string& options_json,
                       const std::vector<ContigSummary>& contigs);

}  // namespace tidemark
