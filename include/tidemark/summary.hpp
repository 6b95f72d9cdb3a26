// Summary and run report of a scan: per-contig and genome-wide composition, likelihood, region
// totals and call statistics, as JSON (--summary, --report) and as readable tables.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "tidemark/call.hpp"
#include "tidemark/progress.hpp"
#include "tidemark/track.hpp"

namespace tidemark {

/// Per-contig totals.
struct ContigSummary {
    std::string name;
    int64_t input_index = 0;  ///< 0-based place of the record (or region) in the whole input
    int64_t offset = 0;
    int64_t length = 0;
    int64_t unknown = 0;
    int64_t soft_masked = 0;
    Composition composition;
    double log_likelihood = 0;
    std::vector<double> expected_bases;  ///< per region: sum of posteriors (Viterbi: path bases)
    std::vector<int64_t> called_bases;   ///< per region: bases inside calls
    std::vector<int64_t> calls;          ///< per region: number of calls
    std::vector<std::vector<int64_t>> call_lengths;  ///< per region: length of every call
    std::vector<double> confidence_sum;  ///< per region: sum of the calls' mean posteriors
    std::vector<std::vector<double>> call_confidences;  ///< per region: every call's mean posterior

    /// Zero call counts and expected bases for `regions` region types (the expected bases
    /// given are kept and padded).
    void reset_calls(size_t regions);
    /// Adds a call to the counts above (sizes the vectors for `regions` region types).
    void add_call(const Call& call, size_t regions);
};

/// Sums posteriors into expected bases per region over a contig.
class RegionTotals final : public DecodeSink {
public:
    explicit RegionTotals(const Model& model) : model_(model) {}
    void begin_contig(const Contig&) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig&, const DecodeResult&) override { ended_ = true; }
    /// A fork that saw a whole contig replaces these totals on join (they are per contig); a
    /// fork that saw a later segment of the contig in progress is added.
    std::unique_ptr<DecodeSink> fork() const override { return std::make_unique<RegionTotals>(model_); }
    void join(DecodeSink& later) override;
    const std::vector<double>& expected_bases() const { return expected_; }
    /// Makes this a fork that saw one segment with these totals (merge of shared contigs).
    void restore_span(std::vector<double> expected) {
        expected_ = std::move(expected);
        begun_ = true;
        ended_ = false;
    }

private:
    const Model& model_;
    bool begun_ = false, ended_ = false;
    std::vector<double> expected_;
    std::vector<double> by_state_;  ///< scratch: one block's per-state sums
};

/// The effective options of a scan, as its report records them ("options"; shard summaries
/// carry them too, so that merge can call split records as the run did).
struct RunOptions {
    std::string profile;                ///< as given: built-in name or file
    std::string decode = "posterior";   ///< "posterior" or "viterbi"
    std::vector<std::string> regions;
    std::string regions_bed;
    CallOptions calling;                ///< with the profile's defaults applied
    BedStyle bed_style = BedStyle::plain;
    bool bgzip = false;
    std::string posteriors;             ///< track prefix ("" = none)
    int posterior_digits = 3;
    int64_t bin = 1;
    TrackFormat track_format = TrackFormat::bedgraph;
    int64_t block = 0;                  ///< --block as given (0 = automatic)
};

/// What the summary says about the run as a whole.
struct RunInfo {
    std::string profile_name;
    std::string profile_checksum;  ///< CRC-32 of the profile's canonical JSON, 8 hex digits
    std::string decode_mode;       ///< "posterior" or "viterbi"
    std::string command_line;
    std::vector<std::string> inputs;
    std::optional<RunOptions> options;  ///< the effective options (reports); unset = none recorded
    std::string shard_json;        ///< shard runs: what merge needs (shard.hpp); "" = not sharded
};

/// The summary as JSON (tidemark-summary/1): run info, genome-wide totals, one entry per
/// contig. Deterministic: the same input gives the same text.
std::string summary_json(const RunInfo& info, const Model& model, const std::vector<ContigSummary>& contigs);

/// The run report (tidemark-report/1): the summary plus call length distributions (min, median,
/// max, and genome-wide histograms of length on a 1-2-5 scale and of confidence in steps of
/// 0.05) and mean confidence, and, kept apart under "resources", wall and CPU time, Mbp/s and
/// peak memory.
std::string report_json(const RunInfo& info, const Model& model, const std::vector<ContigSummary>& contigs,
                        const ResourceUsage& usage);

/// One line per contig plus a total line.
std::string summary_table(const Model& model, const std::vector<ContigSummary>& contigs);

/// The genome-wide part only, for the end of a run.
std::string genome_table(const Model& model, const std::vector<ContigSummary>& contigs, const ResourceUsage& usage);

}  // namespace tidemark
