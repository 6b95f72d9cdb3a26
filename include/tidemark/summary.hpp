// Summary and run report of a scan: per-contig and genome-wide composition, likelihood, region
// totals and call statistics, as JSON (--summary, --report) and as readable tables.
#pragma once

#include <algorithm>
#include <cstdint>
#include <functional>
#include <limits>
#include <memory>
#include <nlohmann/json_fwd.hpp>
#include <optional>
#include <string>
#include <string_view>
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
    std::vector<double> expected_bases;  ///< per region: sum of posteriors over known bases
                                         ///< (Viterbi: known path bases)
    std::vector<int64_t> called_bases;   ///< per region: known bases inside calls
    std::vector<int64_t> calls;          ///< per region: number of calls
    std::vector<std::vector<int64_t>> call_lengths;  ///< per region: length of every call
    std::vector<double> confidence_sum;  ///< per region: sum of the calls' mean posteriors
    std::vector<std::vector<double>> call_confidences;  ///< per region: every call's mean posterior
    /// Profiles with a contig screen (contig_screen.hpp), contigs of at least its min_known
    /// known bases: the distance of the contig's trinucleotide signature from the genome's and
    /// the largest distance of the genome's own stretches of that length; NaN otherwise.
    double composition_distance = std::numeric_limits<double>::quiet_NaN();
    double composition_limit = std::numeric_limits<double>::quiet_NaN();

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
    void begin_contig(const Contig& contig) override;
    /// Adds the block's posteriors at known bases (unknown ones are left out).
    void block(const BlockView& view) override;
    void end_contig(const Contig&, const DecodeResult&) override { ended_ = true; }
    /// A fork that saw a whole contig replaces these totals on join (they are per contig); a
    /// fork that saw a later segment of the contig in progress is added.
    std::unique_ptr<DecodeSink> fork() const override {
        return std::make_unique<RegionTotals>(model_);
    }
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
    const Contig* contig_ = nullptr;
    std::vector<std::pair<int64_t, int64_t>> unknown_;  ///< scratch: one block's unknown runs
};

/// The effective options of a scan, as its report records them ("options"; shard summaries
/// carry them too, so that merge can call split records as the run did).
struct RunOptions {
    std::string profile;               ///< as given: built-in name or file
    std::string decode = "posterior";  ///< "posterior" or "viterbi"
    std::vector<std::string> regions;
    std::string regions_bed;
    CallOptions calling;  ///< with the profile's defaults applied
    BedStyle bed_style = BedStyle::plain;
    bool bgzip = false;
    std::string posteriors;  ///< track prefix ("" = none)
    int posterior_digits = 3;
    int64_t bin = 1;
    TrackFormat track_format = TrackFormat::bedgraph;
    int64_t block = 0;                 ///< --block as given (0 = automatic)
    bool soft_masked_unknown = false;  ///< --soft-masked unknown (recorded only when set)
};

/// What the summary says about the run as a whole.
struct RunInfo {
    std::string profile_name;
    std::string profile_checksum;  ///< CRC-32 of the profile's canonical JSON, 8 hex digits
    std::string decode_mode;       ///< "posterior" or "viterbi"
    std::string command_line;
    std::vector<std::string> inputs;
    std::optional<RunOptions> options;  ///< the effective options (reports); unset = none recorded
    /// Shard runs: the "shard" section, what merge needs (shard.hpp: shard_section); null = not
    /// sharded. The scale-out layer writes it; the summary only places it.
    std::shared_ptr<const nlohmann::ordered_json> shard;
    bool soft_masked_unknown =
        false;  ///< lowercase bases were read as unknown (--soft-masked unknown)
};

/// The CpG-depletion guard. A profile with a `cpg_island` region contrasts CpG-rich islands with
/// a CpG-depleted background, as in vertebrate genomes (bulk CpG o/e about 0.2: one fifth of the
/// expected frequency, IHGSC 2001, Nature 409:860-921, from memory; 0.22 measured on human chrX,
/// GRCh37). Where CpG is not depleted the profile's calls are not CpG islands. The rule: warn when
/// the CpG o/e of all known bases exceeds 0.6 (the island threshold of Gardiner-Garden & Frommer
/// 1987, J. Mol. Biol. 196:261-282: bulk DNA that passes it is, by that definition, not
/// depleted) over at least 50 kb, or 0.8 over 20 to 50 kb; or when that of one contig with at
/// least 1 Mbp of known bases exceeds 0.6. The lengths are measured on human chrX (GRCh37):
/// every 50-kb window has o/e <= 0.595 (45-kb windows reach 0.603 in CpG-island-dense
/// stretches), every 20-kb window <= 0.764, and 1-Mbp windows stay below 0.43; so human inputs
/// of those lengths never warn, and shorter inputs are not judged.
struct DepletionRule {
    static constexpr double max_obs_exp = 0.6;
    static constexpr int64_t min_genome_known = 50'000;
    static constexpr double short_max_obs_exp = 0.8;
    static constexpr int64_t short_min_known = 20'000;
    static constexpr int64_t min_contig_known = 1'000'000;
};
struct DepletionWarning {
    std::string contig;  ///< "" = the whole input
    double cpg_obs_exp = 0;
    int64_t known_bases = 0;
    std::string message;
};
/// The guard's warnings for this model and these contigs (none unless the model has a
/// `cpg_island` region): the whole input first, then contigs in input order (contigs only when
/// the whole input does not warn).
std::vector<DepletionWarning> depletion_warnings(const Model& model,
                                                 const std::vector<ContigSummary>& contigs);

/// Contig screening: which contigs of an assembly have a composition foreign to it. It applies
/// to window profiles with a background (the regions the profile does not report, such as
/// gc-shift's `typical`) and at least one reported region; the reported regions are then the
/// atypical ones. A contig's P(atypical) is the mean posterior of the atypical regions over its
/// known bases (the summary's `atypical_fraction`, the sum of their `expected_fraction`). A
/// contig is foreign when it carries evidence, at least window.min_known known bases (fewer
/// cannot fill one window that counts, the evidence rule of the profile format), and its
/// P(atypical) is at least 0.5: more of its bases are atypical than typical (tidemark's rule;
/// screening drafts for foreign contigs is a standard step before submission, common practice).
struct ForeignContigRule {
    static constexpr double min_atypical = 0.5;
    /// True when the model has a background and an atypical region and is a window profile (or
    /// the region view of one, as the sinks see it).
    static bool applies(const Model& model);
    /// The known bases a contig needs: the model's window.min_known.
    static int64_t min_known(const Model& model) {
        return std::max<int64_t>(1, model.window_min_known);
    }
    /// Mean posterior of the atypical (reported) regions over the contig's known bases (0 when
    /// none is known).
    static double atypical_fraction(const Model& model, const ContigSummary& contig);
    /// True when the contig was screened and its composition lies beyond the genome's own
    /// (composition_distance > composition_limit).
    static bool composition_foreign(const ContigSummary& contig) {
        return contig.composition_distance > contig.composition_limit;
    }
    /// The rule: a window profile's contig with at least min_known known bases whose mean
    /// posterior of the atypical regions is at least min_atypical, or whose composition the
    /// screen finds foreign (false when the rule does not apply to the model).
    static bool foreign(const Model& model, const ContigSummary& contig);
};

/// Genome-wide totals of the contigs (name "(all)"; call lengths and confidences of all contigs).
ContigSummary genome_total(const Model& model, const std::vector<ContigSummary>& contigs);

/// The summary of a run, built as its records finish: genome-wide totals and the depletion
/// guard's candidates, while each record's entries in the summary and report JSON and its row
/// of the verbose table are formatted at once and spooled (in memory, then in a temporary
/// file). Memory does not grow with the number of records, only with the number of calls
/// (their lengths and confidences feed the genome-wide medians and histograms). The documents
/// are those of summary_json and report_json below, byte for byte.
class SummaryBuilder {
public:
    struct Parts {
        bool summary = false, report = false, table = false;  ///< what will be written
    };
    SummaryBuilder(const Model& model, bool soft_masked_unknown, Parts parts);
    ~SummaryBuilder();
    SummaryBuilder(const SummaryBuilder&) = delete;
    SummaryBuilder& operator=(const SummaryBuilder&) = delete;

    void add(const ContigSummary& contig);
    int64_t contigs() const { return contigs_; }
    const ContigSummary& total() const { return total_; }
    std::vector<DepletionWarning> depletion_warnings() const;
    /// The contigs ForeignContigRule flags, in input order (name, input index, length and
    /// composition kept; expected bases as given).
    const std::vector<ContigSummary>& foreign_contigs() const { return foreign_; }

    /// Receives a document piece by piece.
    using Writer = std::function<void(std::string_view)>;
    void write_summary(const RunInfo& info, const Writer& out) const;
    void write_report(const RunInfo& info, const ResourceUsage& usage, const Writer& out) const;
    /// The verbose table: one line per record plus a total line.
    void write_table(const Writer& out) const;
    /// The genome-wide lines printed at the end of a run.
    std::string genome_table(const ResourceUsage& usage) const;

private:
    class Spool;
    void write_document(const char* format, const RunInfo& info, bool report, const Spool& entries,
                        const ResourceUsage* usage, const Writer& out) const;
    const Model& model_;
    bool masked_;
    Parts parts_;
    int64_t contigs_ = 0;
    ContigSummary total_;
    std::vector<ContigSummary> undepleted_;  ///< contigs the guard names (name, composition)
    std::vector<ContigSummary> foreign_;     ///< contigs ForeignContigRule flags
    bool screened_ = false;                  ///< some contig carries a contig-screen distance
    std::unique_ptr<Spool> summary_entries_, report_entries_, table_rows_;
};

struct LengthStats {
    int64_t min = 0, max = 0;
    double median = 0;  ///< of an even count: the mean of the two middle values
};
LengthStats length_stats(std::vector<int64_t> lengths);

/// Histogram bin edges of the run report: call lengths on a 1-2-5 scale from 1 to beyond the
/// longest, and confidences 0, 0.05, ..., 1.
std::vector<double> call_length_edges(int64_t longest);
std::vector<double> confidence_edges();
/// Counts of values with edges[i] <= v < edges[i+1]; the last bin includes its upper edge.
std::vector<int64_t> histogram_counts(const std::vector<double>& edges,
                                      const std::vector<int64_t>& values);
std::vector<int64_t> histogram_counts(const std::vector<double>& edges,
                                      const std::vector<double>& values);

/// The summary as JSON (tidemark-summary/1): run info, genome-wide totals, one entry per
/// contig. Deterministic: the same input gives the same text.
std::string summary_json(const RunInfo& info, const Model& model,
                         const std::vector<ContigSummary>& contigs);

/// The run report (tidemark-report/1): the summary plus call length distributions (min, median,
/// max, and genome-wide histograms of length on a 1-2-5 scale and of confidence in steps of
/// 0.05) and mean confidence, and, kept apart under "resources", wall and CPU time, Mbp/s and
/// peak memory.
std::string report_json(const RunInfo& info, const Model& model,
                        const std::vector<ContigSummary>& contigs, const ResourceUsage& usage);

}  // namespace tidemark
