// The HTML report of a scan (--html): one self-contained page with the run's warnings, inputs
// and profile, genome-wide and per-sequence tables, the calls themselves (in position order, and
// the most confident and the longest), and inline SVG figures (calls along each sequence, call
// length and confidence histograms, the posterior with GC and CpG o/e around example calls).
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "tidemark/call.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/summary.hpp"

namespace tidemark {

struct HtmlReportOptions {
    int shown_sequences =
        200;            ///< the longest this many sequences get a row in the figure and table
    int top_calls = 6;  ///< windows around the most confident calls, from distinct loci
    /// Calls listed in the page's table of calls (the first this many in position order);
    /// beyond it the page says how many more there are and points to the BED.
    int listed_calls = 5000;
    int ranked_calls = 10;  ///< rows of the tables of the most confident and the longest calls
    /// Posterior values (all reported regions together) kept per sequence while it is decoded:
    /// the posterior is averaged over bins of ceil(length * regions / this) bases. Memory per
    /// sequence in flight: this many floats (4 MiB).
    int64_t sketch_values = int64_t{1} << 20;
    int overview_bins = 1000;  ///< bins along one sequence in the along-sequence figure
    int window_points = 600;   ///< bins across the window around a top call
};

/// What the report keeps of one sequence for the along-sequence figure: per bin, the mean
/// posterior of each reported region over the bin's known bases (NaN when it has none: nothing
/// is drawn inside assembly gaps), whether a call of that region touches the bin, and the
/// fraction of unknown bases.
struct SequenceSketch {
    std::string name;
    int64_t ordinal = 0;  ///< place among the sequences of the run (index into the summaries)
    int64_t offset = 0;
    int64_t length = 0;
    int64_t bin = 1;               ///< bases per bin (the last bin is shorter)
    std::vector<float> posterior;  ///< [bin * regions + k], k = k-th reported region
    std::vector<uint8_t> called;   ///< [bin * regions + k]: 1 when a call covers part of the bin
    std::vector<float> unknown;    ///< per bin: fraction of unknown bases
};

/// The posterior around one call, binned, with the composition that explains it.
struct CallWindow {
    std::string name;  ///< sequence
    int64_t ordinal = 0;
    int64_t offset = 0;
    int64_t sequence_length = 0;
    Call call;                     ///< contig coordinates (add offset)
    int64_t begin = 0, end = 0;    ///< the window, contig coordinates
    int64_t bin = 1;               ///< bases per point
    std::vector<float> posterior;  ///< [point * regions + k], mean over known bases (NaN: none)
    std::vector<float> unknown;    ///< per point: fraction of unknown bases
    /// Per point: GC and CpG observed/expected of the known bases of the step holding it
    /// (steps of whole points, at least 200 bases and at most about 80 across the window, the
    /// points shared out evenly); NaN where undefined.
    std::vector<float> gc;
    std::vector<float> cpg_obs_exp;
    std::vector<Call> nearby;  ///< calls overlapping the window (the call itself included)
};

/// One call as the page's tables list it.
struct ListedCall {
    std::string name;  ///< sequence
    int64_t ordinal = 0;
    int64_t offset = 0;
    Call call;  ///< contig coordinates (add offset)
};

/// Sink that keeps a bounded sketch of the posteriors for the report. While a sequence is
/// decoded it keeps the posterior of each reported region summed over bins of its known bases
/// (at most sketch_values floats per sequence); when the sequence's calls are known
/// (finish_sequence) it keeps a coarser profile for the along-sequence figure (only for the
/// longest shown_sequences sequences seen so far), the first listed_calls calls, the
/// ranked_calls most confident and longest, and the posterior around example calls, and drops
/// the rest. Example calls: the most confident (mean posterior, then length, then run order),
/// calls with sequence on both sides before calls that span their sequence, each window at
/// least a window's width from the windows already taken on its sequence (a greedy pass in
/// that order; the same picks whatever the order sequences finish in, since windows on
/// different sequences never clash). Memory: one sketch per sequence in flight, plus
/// shown_sequences x overview_bins and top_calls x window_points values and the listed calls.
///
/// Forkable like the other sinks: a fork that saw a whole sequence replaces this sink's
/// sequence in progress on join; a fork that saw a later segment of it is appended (bins that
/// straddle the seam are added). Segments split the same way for any thread count, so the
/// report is the same for any -t.
class HtmlReport final : public DecodeSink {
public:
    HtmlReport(const Model& model, HtmlReportOptions options = {});
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig&, const DecodeResult&) override { ended_ = true; }
    std::unique_ptr<DecodeSink> fork() const override;
    void join(DecodeSink& later) override;

    /// After the sequence decoded last has been joined: takes its calls (contig coordinates,
    /// sorted as IntervalCaller gives them) and keeps what the report shows of it. Called once
    /// for every sequence of the run, empty ones included, in the order of the summaries.
    void finish_sequence(const Contig& contig, const std::vector<Call>& calls);

    /// Sequences seen and those kept for the figure (the longest, in input order).
    int64_t sequences_seen() const { return seen_; }
    const std::vector<SequenceSketch>& shown() const { return shown_; }
    /// Windows around the example calls, most confident first.
    const std::vector<CallWindow>& top_windows() const { return windows_; }
    /// The first listed_calls calls of the run in position order (input order of sequences).
    const std::vector<ListedCall>& listed_calls() const { return listed_; }
    int64_t calls_seen() const { return calls_seen_; }
    /// The ranked_calls most confident calls (as top_windows ranks them) and the longest
    /// (ties: the more confident, then the earlier).
    const std::vector<ListedCall>& most_confident() const { return most_confident_; }
    const std::vector<ListedCall>& longest() const { return longest_; }
    const std::vector<int>& reported_regions() const { return reported_; }

private:
    HtmlReport(const Model& model, HtmlReportOptions options, bool forked);
    void flush_bin();

    const Model& model_;
    HtmlReportOptions options_;
    std::vector<int> reported_;           ///< reported region indices
    std::vector<int> summed_states_;      ///< states of reported regions
    std::vector<size_t> slot_of_summed_;  ///< their region's index into reported_
    // The sequence in progress.
    bool begun_ = false, ended_ = false;
    int64_t length_ = 0;
    int64_t resolution_ = 1;           ///< bases per sketch bin
    int64_t first_bin_ = -1;           ///< bin of sketch_[0] (a segment fork starts inside)
    std::vector<UnknownRun> unknown_;  ///< of the sequence in progress (known bases are summed)
    size_t next_unknown_ = 0;          ///< first run not wholly before the last block
    std::vector<float> sketch_;        ///< [(bin - first_bin_) * regions + k]: posterior sums
    std::vector<double> pending_;      ///< sums of the bin being filled
    int64_t pending_bin_ = -1;
    // What the report keeps.
    int64_t seen_ = 0;
    std::vector<SequenceSketch> shown_;
    std::vector<CallWindow> windows_;
    std::vector<ListedCall> listed_, most_confident_, longest_;
    int64_t calls_seen_ = 0;
};

/// The run as the report shows it.
struct HtmlReportInput {
    const RunInfo* info = nullptr;
    const Profile* profile = nullptr;
    const Model* model = nullptr;
    const CallOptions* calling = nullptr;
    const std::vector<ContigSummary>* contigs = nullptr;
    const HtmlReport* sketch = nullptr;
    /// The warnings of the run (Logger::warnings), shown in a box at the top, and how many
    /// there were in all (more than listed when the logger kept only the first ones).
    const std::vector<std::string>* warnings = nullptr;
    size_t warning_count = 0;
    std::string bed_path;  ///< where the full list of calls is ("" = standard output)
};

/// The report as one HTML5 document: no scripts, no external resources (a Content-Security-
/// Policy forbids both), figures as inline SVG, every text taken from the inputs escaped.
/// Colours are the regions' browser-BED colours (region_color). Deterministic: no time stamps.
std::string format_html_report(const HtmlReportInput& input);

/// Text with & < > " ' replaced by character references (for element text and attribute values).
std::string html_escape(std::string_view text);

}  // namespace tidemark
