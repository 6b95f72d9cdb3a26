// Summary of a scan: per-contig and genome-wide composition, likelihood and region totals,
// as JSON (--summary) and as a readable table (--verbose).
#pragma once

#include <string>
#include <vector>

#include "tidemark/call.hpp"

namespace tidemark {

/// Per-contig totals for the summary.
struct ContigSummary {
    std::string name;
    int64_t offset = 0;
    int64_t length = 0;
    int64_t unknown = 0;
    int64_t soft_masked = 0;
    Composition composition;
    double log_likelihood = 0;
    std::vector<double> expected_bases;  ///< per region: sum of posteriors (Viterbi: path bases)
    std::vector<int64_t> called_bases;   ///< per region: bases inside calls
    std::vector<int64_t> calls;          ///< per region: number of calls
};

/// Accumulates the expected bases per region over a contig.
class RegionTotals final : public DecodeSink {
public:
    explicit RegionTotals(const Model& model) : model_(model) {}
    void begin_contig(const Contig&) override;
    void block(const BlockView& view) override;
    const std::vector<double>& expected_bases() const { return expected_; }

private:
    const Model& model_;
    std::vector<double> expected_;
};

/// What the summary says about the run as a whole.
struct RunInfo {
    std::string profile_name;
    std::string decode_mode;  ///< "posterior" or "viterbi"
    std::string command_line;
    std::vector<std::string> inputs;
};

/// The summary as JSON (tidemark-summary/1): run info, genome-wide totals, one entry per contig.
std::string summary_json(const RunInfo& info, const Model& model,
                         const std::vector<ContigSummary>& contigs);

/// One human-readable line per contig plus a total line, for stderr.
std::string summary_table(const Model& model, const std::vector<ContigSummary>& contigs);

}  // namespace tidemark
