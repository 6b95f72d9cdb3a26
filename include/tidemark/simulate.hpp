// Simulation: synthetic contigs drawn from a profile's HMM, with their true region segments,
// streamed block by block so that memory does not grow with the length simulated.
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <string_view>
#include <vector>

#include "tidemark/log.hpp"
#include "tidemark/profile.hpp"

namespace tidemark {

/// What to draw. The generative model is exactly the one the decoders assume:
///  - the hidden chain starts from Model::initial at each contig start and moves by
///    Model::transitions at every position, gap positions included (a gap hides bases, not
///    the chain: the decoder marginalises an unknown base, which is the same thing);
///  - a known base is drawn from the state's order-k row for the k preceding bases, or from
///    its mean row when fewer than k known bases precede it (contig start, after a gap);
///  - window models move once per window (at positions that are multiples of the window size)
///    and draw a window's known bases from Polya's urn, so that its G+C count is beta-binomial
///    with the state's parameters; G+C bases are C or G, A+T bases A or T, with probability 1/2;
///  - gaps: an independent two-state chain over positions (known / unknown), started from its
///    stationary distribution, with geometric run lengths: unknown runs of mean
///    gap_mean_length, known runs of mean gap_mean_length * (1 - f) / f, so that the expected
///    fraction of unknown bases is f = gap_fraction at every position.
/// Random numbers: xoshiro256** seeded through SplitMix64 and tidemark's own integer-threshold
/// sampling (no <random> distributions, no floating point while drawing), so one seed gives
/// byte-identical output on every machine, compiler and standard library. A tidemark release
/// that changes the order of the draws says so in the CHANGELOG.
struct SimulateOptions {
    std::vector<int64_t> lengths;     ///< one contig per entry, in bases (each >= 1)
    uint64_t seed = 1;                ///< the whole run is a function of the seed
    double gap_fraction = 0;          ///< expected fraction of bases in unknown (N) runs, [0, 1)
    double gap_mean_length = 100;     ///< mean N-run length in bases (>= 1)
    std::string name_prefix = "sim";  ///< contigs are named PREFIX1, PREFIX2, ...
};

/// Throws UsageError naming the offending option (empty lengths, a length < 1, a gap fraction
/// outside [0, 1), a mean gap length < 1, or a gap fraction too large for the mean gap length:
/// known runs must average at least one base, i.e. f <= L / (L + 1)).
void validate(const SimulateOptions& options);

/// Consecutive simulated positions of one contig. Pointers are valid during the block call only.
struct SimulatedBlock {
    int64_t begin = 0;  ///< contig position of element 0
    int64_t size = 0;
    const int* states = nullptr;     ///< hidden state per position (Model state index)
    const uint8_t* bases = nullptr;  ///< base codes 0..3, 4 = unknown (inside a gap)
};

/// Receives the simulation in order: begin_contig, blocks covering [0, length), end_contig.
class SimulationSink {
public:
    virtual ~SimulationSink() = default;
    virtual void begin_contig(const std::string& /*name*/, int64_t /*length*/) {}
    virtual void block(const SimulatedBlock& block) = 0;
    virtual void end_contig() {}
};

/// Draws every contig of options.lengths. Work O(total length * mean out-degree); memory one
/// block of 64 Ki positions plus sampling tables the size of the model's.
void simulate(const Model& model, const SimulateOptions& options, SimulationSink& sink);

/// Where a formatting sink sends its text (e.g. OutputFile::write).
using TextWriter = std::function<void(std::string_view)>;

/// Formats FASTA: ">NAME" then the bases as A, C, G, T and N, line_width per line
/// (0 = each contig on one line).
class FastaFormatter final : public SimulationSink {
public:
    FastaFormatter(TextWriter out, int line_width);
    void begin_contig(const std::string& name, int64_t length) override;
    void block(const SimulatedBlock& block) override;
    void end_contig() override;

private:
    TextWriter out_;
    int width_;
    int64_t column_ = 0;
    std::string buffer_;
};

/// Formats the true segments as BED4 (chrom, start, end, region name): one line per maximal
/// run of positions whose states belong to one region; the lines of a contig tile it.
class TruthFormatter final : public SimulationSink {
public:
    TruthFormatter(TextWriter out, const Model& model);
    void begin_contig(const std::string& name, int64_t length) override;
    void block(const SimulatedBlock& block) override;
    void end_contig() override;

private:
    void flush_segment(int64_t end);
    TextWriter out_;
    const Model& model_;
    std::string name_, buffer_;
    int region_ = -1;  ///< region of the open segment, -1 before the first position
    int64_t begin_ = 0;
    int64_t end_ = 0;  ///< one past the last position seen
};

/// The `tidemark simulate` job.
struct SimulateJob {
    std::string profile = "cpg-island";  ///< built-in name or profile file
    SimulateOptions simulation;
    std::string output = "-";  ///< FASTA, "-" = stdout
    std::string truth;         ///< truth BED; "" = none
    int line_width = 60;       ///< FASTA bases per line, 0 = unlimited
};

/// Checks the job's options (including the simulation's); throws UsageError.
void validate(const SimulateJob& job);

/// Totals of a run, for the log and for callers.
struct SimulationTotals {
    int64_t contigs = 0;
    int64_t bases = 0;
    int64_t unknown = 0;                ///< bases inside gaps
    std::vector<int64_t> region_bases;  ///< per Model region, gap bases included
};

/// Runs the job: outputs appear (renamed into place) only when the whole run succeeded.
SimulationTotals run_simulate(const SimulateJob& job, const Logger& log);

}  // namespace tidemark
