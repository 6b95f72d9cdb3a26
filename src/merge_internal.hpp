// Internal to `tidemark merge` (src/merge*.cpp) and its unit tests: the three steps of a merge.
//   merge_docs.cpp     reads and checks the shards' summaries and reports (ShardDoc);
//   merge_records.cpp  lays out every record of the input in input order and restores split
//                      records from their segments (MergedRun, SplitAssembly);
//   merge_files.cpp    streams the shards' BED, GFF3, bedGraph, bigWig and chrom-sizes files
//                      back in input order.
#pragma once

#include <htslib/bgzf.h>
#include <htslib/kstring.h>

#include <cstdint>
#include <map>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "shard_internal.hpp"
#include "tidemark/call.hpp"
#include "tidemark/log.hpp"
#include "tidemark/output.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/summary.hpp"
#include "tidemark/track.hpp"

namespace tidemark::merging {

// --- Shard documents (merge_docs.cpp) ---------------------------------------------------------

/// One shard's summary or report.
struct ShardDoc {
    std::string path;
    ordered_json doc;
    int index = 0, count = 0;
    int64_t records = 0;
    std::vector<ContigSummary> contigs;  ///< this shard's whole records, in input order
    std::vector<SplitRecord> split;      ///< its segments of records split between shards
};

/// Reads one summary or report (`format`: "tidemark-summary/1" or "tidemark-report/1") written
/// by scan --shard. Throws InputError naming the file.
ShardDoc read_doc(const std::string& path, const char* format);

/// The parts every shard of one run shares; anything else differing means different runs. The
/// command and the track prefix may differ in output names, so they are not compared.
ordered_json run_identity(const ordered_json& doc);

/// Reads and checks one kind of shard document (every shard of one run, each once); keeps the
/// order given (BED and track files pair with the documents in that order).
std::vector<ShardDoc> read_docs(const std::vector<std::string>& paths, const char* format);

/// The document of shard 1: its command and options go into the merged files.
const ShardDoc& first_shard(const std::vector<ShardDoc>& docs);

/// Warns when the shards' recorded commands differ (then the merged files record shard 1's).
void warn_on_commands(const std::vector<ShardDoc>& docs, const Logger& log);

/// The parts of a Model the summary writer reads: region names and which are reported.
Model region_model(const ordered_json& doc);

/// What the merged summary and report say about the run, from a shard's document.
RunInfo run_info(const ordered_json& doc);

/// Wall and CPU seconds summed over the shards, peak memory the largest shard's.
ResourceUsage summed_resources(const std::vector<ShardDoc>& docs);

/// The records each shard decoded, as (input index, name), sorted: its whole records and the
/// split records it has a piece of. Its chrom sizes and bigWig sequence lists name exactly these.
std::vector<std::vector<std::pair<int64_t, std::string>>> shard_records(
    const std::vector<ShardDoc>& docs);

/// "shard I/N (PATH)", for messages.
std::string shard_label(const ShardDoc& doc);

// --- Records in input order; split records restored (merge_records.cpp) -----------------------

/// A record split between shards, put back together: every segment from the shard that
/// decoded it, joined in order as a single run joins them.
struct SplitAssembly {
    SplitRecord record;  ///< whole-record fields (log-likelihood from the last segment's shard)
    std::vector<std::pair<size_t, const SplitSegment*>> segments;  ///< (doc, segment) in order
    ContigSummary summary;
    std::vector<Call> calls;
    Contig contig;  ///< name and coordinates only, for formatting
};

/// Where each record of the input comes from: a whole record of one shard, or an assembly.
struct Slot {
    size_t doc = SIZE_MAX, index = 0;  ///< docs[doc].contigs[index]
    int split = -1;                    ///< >= 0: MergedRun::split[split]
};

/// What the calls of split records need: the run's compiled profile and its calling options.
struct SplitContext {
    Model model;
    CallOptions calling;
    BedStyle style = BedStyle::plain;
};

/// The profile of the run (the shards' own, or profile_override), checked against the recorded
/// checksum, and the calling options the shards recorded. Throws InputError naming the file.
SplitContext split_context(const ShardDoc& doc, const std::string& profile_override);

/// Composition of [begin, end) of a split record from its segments' prefix compositions: with
/// G(p) the composition of [0, p), it is G(end) - G(begin) less the CpG straddling begin - 1
/// and begin. Throws InputError for a position with no prefix composition.
class PrefixCompositions {
public:
    explicit PrefixCompositions(const SplitAssembly& assembly);
    Composition operator()(int64_t begin, int64_t end) const;

private:
    std::map<int64_t, std::pair<Composition, bool>> at_;  ///< G(p), CpG straddling p - 1 and p
};

/// The segments must tile the record in order, and what each holds must lie inside it (calls of
/// reported regions, prefix compositions from its start to its end); anything else is an edited
/// or foreign file (InputError).
void check_segments(const std::vector<ShardDoc>& docs, const SplitAssembly& assembly,
                    const Model& model);

/// Joins the segments' caller and totals states in order, as the single run does: fills the
/// assembly's calls, summary and contig.
void join_segments(SplitAssembly& assembly, const SplitContext& context);

/// Every record of the input, in input order, and the split records put back together.
struct MergedRun {
    std::vector<Slot> slots;
    std::vector<SplitAssembly> split;
    std::vector<ContigSummary> contigs;
    std::optional<SplitContext> context;  ///< when there are split records
};

/// Lays the shards' records out in input order and restores the split ones; checks that the
/// shards cover every record (and every segment of a split one) exactly once.
MergedRun assemble(const std::vector<ShardDoc>& docs, const std::string& profile_override);

/// The shard whose file gives a record's sequence entry: the record's own, or for a split
/// record the shard of its first segment.
size_t source_doc(const MergedRun& run, const Slot& slot);

std::string record_name(const std::vector<ShardDoc>& docs, const MergedRun& run, const Slot& slot);

// --- Shard files streamed back in input order (merge_files.cpp) -------------------------------

/// Lines of a plain or BGZF-compressed text file, with one line of look-ahead.
class LineReader {
public:
    explicit LineReader(std::string path);
    ~LineReader();
    LineReader(const LineReader&) = delete;
    LineReader& operator=(const LineReader&) = delete;

    /// The current line without its newline, or nullptr at the end.
    const std::string* peek();
    void pop() { have_ = false; }
    const std::string& path() const { return path_; }
    int64_t number() const { return number_; }

private:
    std::string path_;
    BGZF* fp_ = nullptr;
    kstring_t line_{0, 0, nullptr};
    std::string current_;
    bool have_ = false, eof_ = false;
    int64_t number_ = 0;
};

/// chrom, start and end of a BED or bedGraph line; false when the line has no such columns.
bool coordinates(const std::string& line, std::string& chrom, int64_t& start, int64_t& end);

/// Streams the shard files (files[k] belongs to docs[k]) into `target` in input order: BED
/// (with split_lines, the formatted calls of each split record) or bedGraph tracks (split
/// records: each piece from the shard that decoded it, equal runs joined across pieces).
/// Returns the output uncommitted, so that nothing appears unless every merge succeeds.
std::unique_ptr<OutputFile> merge_text(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                       const std::vector<std::string>& files,
                                       const std::string& target, const OutputFormat& base_format,
                                       const std::vector<std::string>* split_lines);

/// GFF3 blocks in input order, feature IDs renumbered through the run (uncommitted).
std::unique_ptr<OutputFile> merge_gff3(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                       const std::vector<std::string>& files,
                                       const std::string& target);

/// Chrom sizes in input order (uncommitted).
std::unique_ptr<OutputFile> merge_chrom_sizes(const std::vector<ShardDoc>& docs,
                                              const MergedRun& run,
                                              const std::vector<std::string>& files,
                                              const std::string& target);

/// bigWig tracks in input order; returns the writer unclosed (write() then commit()).
std::unique_ptr<BigWigWriter> merge_bigwig(const std::vector<ShardDoc>& docs, const MergedRun& run,
                                           const std::vector<std::string>& files,
                                           const std::string& target);

bool exists(const std::string& path);

}  // namespace tidemark::merging
