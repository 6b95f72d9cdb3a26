// The scan job: sequences -> decoding -> calls, tracks and summary, as one library call.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "tidemark/log.hpp"
#include "tidemark/summary.hpp"

namespace tidemark {

enum class DecodeMode { posterior, viterbi };

struct ScanOptions {
    std::vector<std::string> inputs;        ///< FASTA paths, "-" = stdin
    std::string profile = "cpg-island";     ///< built-in name or file path
    std::string output = "-";               ///< BED of calls, "-" = stdout
    std::vector<std::string> regions;       ///< region strings (faidx)
    std::string regions_bed;                ///< BED of regions (faidx)
    DecodeMode decode = DecodeMode::posterior;
    std::optional<double> min_posterior;    ///< unset: the profile's calling default
    std::optional<int64_t> merge_gap;       ///< unset: the profile's calling default
    std::optional<int64_t> min_length;      ///< unset: the profile's calling default
    IslandCriteria criteria = IslandCriteria::none;
    std::string posteriors_prefix;          ///< bedGraph tracks PREFIX.REGION.bedgraph; "" = none
    int posterior_digits = 3;               ///< decimals kept in bedGraph values
    std::string summary_path;               ///< JSON summary; "" = none
    int64_t block_size = 0;                 ///< decoder block (0 = automatic)
    std::string command_line;               ///< recorded in headers and the summary
};

/// Validates option combinations; throws UsageError naming the conflict.
void validate(const ScanOptions& options);

/// Runs the whole scan. Outputs appear only when the whole run succeeds.
std::vector<ContigSummary> run_scan(const ScanOptions& options, const Logger& log);

}  // namespace tidemark
