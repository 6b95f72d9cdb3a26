// The scan job: sequences -> decoding -> calls, tracks, summary and report, as one library call.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "tidemark/log.hpp"
#include "tidemark/shard_spec.hpp"
#include "tidemark/summary.hpp"
#include "tidemark/track.hpp"

namespace tidemark {

enum class DecodeMode { posterior, viterbi };

struct ScanOptions {
    std::vector<std::string> inputs;            ///< FASTA paths, "-" = stdin
    std::string profile = "cpg-island";         ///< built-in name or file path
    std::string output = "-";                   ///< calls as BED, "-" = stdout
    std::vector<std::string> regions;           ///< region strings (faidx)
    std::string regions_bed;                    ///< BED of regions (faidx)
    SoftMasked soft_masked = SoftMasked::base;  ///< lowercase bases: as their base, or unknown
    DecodeMode decode = DecodeMode::posterior;
    std::optional<double> min_posterior;  ///< unset: the profile's calling default
    std::optional<int64_t> merge_gap;     ///< unset: the profile's calling default
    std::optional<int64_t> min_length;    ///< unset: the profile's calling default
    double high_posterior = 0.95;         ///< core (thickStart/thickEnd) threshold
    IslandCriteria criteria = IslandCriteria::none;
    BedStyle bed_style = BedStyle::plain;
    bool bgzip = false;              ///< BGZF + tabix for BED and bedGraph outputs
    std::string gff3_path;           ///< calls as GFF3; "" = none
    std::string chrom_sizes_path;    ///< "name<TAB>length" per sequence; "" = none
    TrackOptions tracks;             ///< posterior tracks; prefix "" = none
    std::string summary_path;        ///< deterministic JSON summary; "" = none
    std::string report_path;         ///< JSON run report with resources; "" = none
    std::string html_path;           ///< self-contained HTML report; "" = none
    int64_t block_size = 0;          ///< decoder block (0 = automatic)
    int threads = 0;                 ///< decoding threads (0 = every core); outputs do not
                                     ///< depend on it
    bool progress = false;           ///< draw a progress line on stderr
    ShardSpec shard;                 ///< decode only this shard's records (not active = all)
    bool whole_contigs = false;      ///< shards never split a record (no seams step)
    std::string emit_seams;          ///< step 1 for shared records: write only their seams
    std::vector<std::string> seams;  ///< step 2: the seams files of every shard
    std::string command_line;        ///< recorded in headers and the summary (without --shard)
};

/// The command line as outputs record it: without the options that never change results,
/// -t/--threads (-t N, -tN, --threads N, --threads=N), --shard (--shard I/N, --shard=I/N),
/// --seams FILE and --whole-contigs, so that runs differing only in those record the same
/// command and write identical files.
/// Words are those of the shell-quoted form tidemark records (single quotes).
std::string recorded_command_line(const std::string& command_line);

/// Validates option combinations; throws UsageError naming the conflict.
void validate(const ScanOptions& options);

/// The calling options of a scan: the profile's calling defaults, overridden where `options`
/// sets them. model is the one the sinks see (region_view for window profiles). Throws
/// UsageError for island criteria on a profile without the region they judge.
CallOptions calling_options(const ScanOptions& options, const Profile& profile, const Model& model);

/// Runs the whole scan. File outputs appear only when the whole run succeeds.
void run_scan(const ScanOptions& options, const Logger& log);

}  // namespace tidemark
