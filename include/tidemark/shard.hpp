// Sharding: a deterministic, length-balanced share of the input records for one of N
// independent processes (scan --shard, fit --emit-stats), and the exact per-contig record that
// `tidemark merge` reads back to rebuild a single run's outputs.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "tidemark/decode.hpp"
#include "tidemark/sequence.hpp"
#include "tidemark/shard_spec.hpp"
#include "tidemark/summary.hpp"

namespace tidemark {

/// One unit of work: a FASTA record (whole-file input) or one resolved region.
struct ShardUnit {
    std::string input;  ///< the file it comes from
    std::string name;
    int64_t length = 0;
    int64_t begin = 0;    ///< a region's start on its sequence (0 for records)
    RecordStart start;    ///< where the record starts in its file (records read by index only)
    RecordLayout layout;  ///< where its bases lie (records read by index only)
};

/// The units of an input in input order, with their lengths. With regions, the resolved regions
/// of inputs[0]. Otherwise every record of every file: lengths from FILE.fai when it is at least
/// as new as FILE, else from an index built beside the file (plain FASTA or bgzip; built under a
/// temporary name and renamed, so that concurrent shards never see half an index), else (plain
/// gzip, xz, bzip2, zstd, unequal line lengths, read-only folder) from one pass over the records.
/// Throws UsageError for standard input (it cannot be read twice), InputError for bad files.
/// by_index (when given): set when every input's index lists all its records (empty records,
/// which faidx leaves out, are found from the bytes between indexed records), or with regions.
std::vector<ShardUnit> list_units(const std::vector<std::string>& inputs,
                                  const std::vector<Region>& regions, bool* by_index = nullptr);

/// Segments [first, last) of a record split between shards, and the shard (0-based) that
/// decodes them.
struct ShardPiece {
    size_t first = 0, last = 0;
    int shard = 0;
};

/// Which shard decodes what: every unit whole on one shard, or split into pieces.
struct ShardPlan {
    std::vector<ShardUnit> units;
    std::vector<int> shard_of;                    ///< per unit: 0-based shard, -1 when split
    std::vector<std::vector<ShardPiece>> pieces;  ///< per unit: its pieces, in order (split only)
};

/// The plan for `count` shards. With segment_length > 0 (the posterior decoder's segment
/// length, PosteriorDecoder::segment_length), a unit longer than one shard's share
/// (ceil(total / count) bases) and than one segment is cut into m = ceil(length / share)
/// pieces of whole segments (piece p: segments [p K / m, (p + 1) K / m) of the K), so that no
/// shard waits on one long chromosome. Whole units and pieces then go to shards by
/// assign_shards. Deterministic: depends only on the lengths, count and segment_length.
ShardPlan plan_shards(std::vector<ShardUnit> units, int count, int64_t segment_length);

/// Greedy longest-first assignment (Graham 1969, "Bounds on multiprocessing timing anomalies",
/// SIAM J. Appl. Math. 17:416-429: the largest load is at most 4/3 - 1/(3N) times the best
/// possible): units by decreasing length, ties by input order, each to the shard with the
/// smallest load so far, ties by the lower shard. Returns the 0-based shard of every unit.
/// Deterministic: depends only on the lengths and N.
std::vector<int> assign_shards(const std::vector<int64_t>& lengths, int count);

/// Decides, record by record as a reader yields them, which records belong to this shard, and
/// checks that the records are those the plan was made from (so that stale indexes cannot make
/// shards overlap or miss records). Empty records, which faidx leaves out, go to shard 1.
class ShardFilter {
public:
    /// Not active: every record is taken (input indexes are still counted).
    ShardFilter() = default;
    /// segment_length: see plan_shards (0 = records are never split).
    ShardFilter(ShardSpec spec, const std::vector<std::string>& inputs,
                const std::vector<Region>& regions, int64_t segment_length);

    /// The source of an input's records (regions: the resolved regions of inputs[0]). When the
    /// input can be read through its index (list_units' by_index), it yields only this shard's
    /// records, so that a shard reads and decompresses its share and not the whole genome;
    /// otherwise every record, and take() picks. pieces_only: only records split between shards.
    std::unique_ptr<SequenceSource> open(const std::string& input,
                                         const std::vector<Region>& regions,
                                         bool pieces_only = false);
    /// How the sources that open() returns read lowercase bases [SoftMasked::base].
    void set_soft_masked(SoftMasked mode) { soft_masked_ = mode; }
    /// True while the source last opened yields only this shard's records.
    bool reading_share() const { return sharing_; }
    /// Advances to the next record; true when it belongs to this shard, wholly or in part.
    /// Throws InputError when the record is not the one planned (name differs, or more records
    /// than planned).
    bool take(const Contig& contig);
    /// True when the record last passed to take() is split between shards.
    bool split() const {
        return current_ >= 0 && !plan_.pieces[static_cast<size_t>(current_)].empty();
    }
    /// Its pieces that this shard decodes (split() only), in order.
    std::vector<ShardPiece> my_pieces() const;
    /// Its number of segments (split() only).
    size_t segments() const;
    /// True when this shard decodes part of a record split between shards.
    bool has_pieces() const;
    /// Records split between shards, with their lengths, as names for messages.
    std::vector<std::string> split_records() const;
    /// 0-based input index of the record last passed to take() (spec().index is the shard).
    int64_t record_index() const { return next_ - 1; }
    /// Throws InputError when fewer records were read than planned.
    void finish();
    /// Records passed to take() so far: after a whole pass, the records of the input (empty
    /// records included, which faidx does not list).
    int64_t records() const { return next_; }

    const ShardSpec& spec() const { return spec_; }
    /// Planned units (non-empty records, or regions).
    int64_t units() const { return static_cast<int64_t>(plan_.units.size()); }
    /// Bases (known and unknown) planned for this shard, and for the whole input.
    int64_t shard_bases() const { return shard_bases_; }
    int64_t total_bases() const { return total_bases_; }

private:
    bool mine(size_t unit) const;  ///< this shard decodes the unit, wholly or in part
    std::unique_ptr<SequenceSource> open_reader(const std::string& input,
                                                const std::vector<Region>& regions,
                                                bool pieces_only);

    ShardSpec spec_;
    ShardPlan plan_;
    int64_t segment_length_ = 0;
    int64_t current_ = -1;  ///< planned unit of the record last taken; -1 = none (empty record)
    SoftMasked soft_masked_ = SoftMasked::base;
    bool read_share_ = false;  ///< inputs can be read through their index (see open)
    bool sharing_ = false;     ///< the current source yields only this shard's units
    int64_t next_ = 0;         ///< records seen
    size_t planned_ = 0;       ///< planned units seen
    int64_t shard_bases_ = 0, total_bases_ = 0;
};

// --- Records split between shards (split by plan_shards) -------------------------------------
// Such a record is decoded in two steps: every shard first writes the seams of its segments
// (scan --emit-seams); then each decodes its segments from all the seams (scan --seams), which
// gives exactly the boundary vectors of a single run, and records what its segments' sinks saw
// (SplitRecord) so that merge can join the segments in order as the single run does.

/// The seams of one shard's segments of one split record.
struct SeamsRecord {
    int64_t input_index = 0;
    std::string name;
    int64_t length = 0;
    size_t segments = 0;          ///< of the whole record
    std::vector<size_t> indexes;  ///< segment index of each seam
    std::vector<SegmentSeam> seams;
};

/// What seams depend on, as a JSON object text: the records (inputs with their size and
/// modification time, regions), the profile checksum and how contigs split (--block, --bin,
/// segment length). scan and fit write the same.
std::string seams_identity(const std::vector<std::string>& inputs,
                           const std::vector<std::string>& regions, const std::string& regions_bed,
                           const std::string& profile_crc32, int64_t block, int64_t bin,
                           int64_t segment_length);

/// Step 1: reads the input (inputs, or regions of inputs[0]) and computes the seams of this
/// shard's segments of every split record (shard.split()); checks the records against the
/// plan (shard.finish()). A shard without such segments reads nothing and returns none.
std::vector<SeamsRecord> compute_seams(ShardFilter& shard, PosteriorDecoder& decoder,
                                       const std::vector<std::string>& inputs,
                                       const std::vector<Region>& regions, TaskPool* pool);

/// The seams file of one shard (tidemark-seams/1): shard index and count, `identity` (what the
/// seams depend on: inputs, profile checksum, decoder options; a JSON object text) and records.
std::string seams_json(const ShardSpec& spec, const std::string& identity,
                       const std::vector<SeamsRecord>& records);

/// The seams of every split record, gathered from the seams files of all shards.
class SeamsTable {
public:
    SeamsTable() = default;
    /// Reads the files; throws InputError for a file that is not a seams file, comes from
    /// another run (identity or shard count differ) or repeats a segment.
    SeamsTable(const std::vector<std::string>& paths, const std::string& identity,
               const ShardSpec& spec);
    bool empty() const { return paths_.empty(); }
    /// All segments' seams of a record; throws InputError naming the missing segments.
    std::vector<SegmentSeam> record(int64_t input_index, const std::string& name, int64_t length,
                                    size_t segments) const;

private:
    struct Entry {
        std::string name;
        int64_t length = 0;
        size_t segments = 0;
        std::vector<SegmentSeam> seams;
        std::vector<bool> have;
    };
    std::vector<std::string> paths_;
    std::vector<std::pair<int64_t, Entry>> records_;  ///< by input index
};

/// Prefix composition of a segment at one position: the bases of [segment begin, position), and
/// whether a CpG straddles position - 1 and position. Merge rebuilds the composition of a call
/// that crosses segments from these.
struct PrefixComposition {
    int64_t position = 0;
    Composition prefix;
    bool cpg_before = false;
};

/// What one shard's sinks saw over one segment of a split record.
struct SplitSegment {
    size_t index = 0;
    int64_t begin = 0, end = 0;
    std::vector<IntervalCaller::Lane> lanes;
    std::vector<Call> calls;                  ///< calls that ended inside the segment
    std::vector<double> expected;             ///< expected bases per region
    std::vector<PrefixComposition> prefixes;  ///< at begin, end and the lanes' group bounds
};

/// A split record as one shard saw it.
struct SplitRecord {
    /// Whole-record fields (name, input_index, offset, length, unknown, soft_masked,
    /// composition); log_likelihood only from the shard with the last segment, else NaN.
    ContigSummary whole;
    int64_t full_length = 0;         ///< of the named sequence (regions)
    size_t segments = 0;             ///< of the whole record
    std::vector<SplitSegment> done;  ///< this shard's segments, in order
};

/// Describes segment `index`, [begin, end) of `contig`, from the forks that decoded it.
SplitSegment describe_segment(const Contig& contig, size_t index, int64_t begin, int64_t end,
                              const IntervalCaller& caller, const RegionTotals& totals);

/// The "shard" object of a shard's summary and report: index, count, records of the whole input,
/// the effective options (a JSON object, so that merge can refuse shards of different runs even
/// from summaries), and every ContigSummary field of this shard's contigs at full precision
/// (what merge needs to rebuild the genome-wide totals exactly).
/// Also the profile checksum (merge checks the profile it loads for split records against it);
/// split records go under "shared".
nlohmann::ordered_json shard_section(const ShardFilter& filter, const RunOptions& options,
                                     const std::string& profile_crc32,
                                     const std::vector<ContigSummary>& contigs,
                                     const std::vector<SplitRecord>& shared);

}  // namespace tidemark
