// Tracks: calls as BED (plain BED6+4 or browser BED9+4) and GFF3, and posterior tracks as
// bedGraph (run-length merged, quantised, optionally binned, bgzip+tabix) or bigWig.
#pragma once

#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "tidemark/call.hpp"
#include "tidemark/output.hpp"

namespace tidemark {

/// One column of the calls BED: its header name and what it holds (the man page lists them).
struct BedColumn {
    const char* name;
    const char* meaning;
};

/// The columns of the calls BED (BED6+4, --bed-style plain), in order; the last four are
/// tidemark's. The browser style puts thickStart, thickEnd and itemRgb after the sixth.
inline constexpr BedColumn bed_columns[] = {
    {"chrom", "record name"},
    {"start",
     "first base of the call, 0-based (window profiles with calling.refine_ends: refined from the "
     "window grid to a base)"},
    {"end", "one past the last base (likewise)"},
    {"name", "region type (e.g. cpg_island)"},
    {"score", "round(1000 x mean_posterior), 0-1000"},
    {"strand", "always '.' (composition regions have no strand)"},
    {"mean_posterior",
     "mean of P(region | whole sequence) over the call's bases, merged gaps included (window "
     "profiles: each base has its window's posterior, also in a window the call covers in part)"},
    {"confident_fraction",
     "share of the call's bases with P(region) >= --core-posterior (0.95): how much of the call "
     "is confidently of its type, as against its uncertain edges and merged stretches (window "
     "profiles: the bases whose window's posterior is at that level)"},
    {"gc_fraction", "(C+G)/(A+C+G+T) over the known bases of the call"},
    {"cpg_obs_exp",
     "observed/expected CpG = N(CpG) x L / (N(C) x N(G)), L = known bases (Gardiner-Garden & "
     "Frommer 1987); NA when N(C) x N(G) = 0"},
};
inline constexpr size_t bed_standard_columns = 6;  ///< bed_columns before tidemark's own

enum class BedStyle {
    plain,    ///< BED6+4: chrom start end name score strand + extra columns
    browser,  ///< BED9+4: adds thickStart thickEnd itemRgb (colour per region), a `track` line
};

/// Colour of a region type as "R,G,B": the profile's `color`, else tidemark's palette by index.
std::string region_color(const Model& model, int region);

/// Header lines: for browser style a `track` line first, then `#` lines with the tool version,
/// profile, command line and column names.
std::string format_bed_header(BedStyle style, const Model& model, const std::string& command_line);

/// One BED line for a call on `contig` (adds contig.offset to the coordinates).
/// score = round(1000 * mean posterior); strand "."; o/e "NA" when N(C)*N(G) = 0.
std::string format_bed_line(BedStyle style, const Model& model, const Contig& contig,
                            const Call& call);

/// GFF3: version pragma; a sequence-region pragma per contig; one feature per call (type
/// CpG_island, SO:0000307, for a region named cpg_island, otherwise region, SO:0000001;
/// score = mean posterior; the BED extra columns as attributes). IDs number calls from 1.
std::string format_gff3_header();
std::string format_gff3_sequence_region(const Contig& contig);
std::string format_gff3_feature(const Model& model, const Contig& contig, const Call& call,
                                int64_t serial);

/// The longest sequence a bigWig can hold: its coordinates are 32-bit.
constexpr int64_t bigwig_max_length = 0xFFFFFFFF;

/// Throws InputError naming the record when it is longer than bigwig_max_length; called as soon
/// as a record's length is known, before it is decoded, when bigWig tracks are asked for.
void check_bigwig_length(const std::string& name, int64_t length);

/// Writes a bigWig file (src/bigwig_write.cpp, after Kent et al. 2010) from bedGraph-like
/// intervals given in order, sequence by sequence; the sequence list grows as sequences are
/// added. Data blocks are compressed while intervals arrive, by `threads` threads (1: on the
/// caller's); the zoom levels are built at write(), one task per level. The file's bytes are the
/// same for any thread count.
class BigWigWriter {
public:
    explicit BigWigWriter(std::string path, int threads = 1);
    ~BigWigWriter();
    /// Returns its index. A bigWig lists a name once, so a name added again (several regions of
    /// one sequence) gets its first index; it must be the last name added and have the same
    /// length (InputError otherwise: its intervals would not be in one stretch).
    int add_sequence(const std::string& name, int64_t length);
    void add(int sequence, int64_t start, int64_t end, double value);
    /// No sequence was added: there is nothing a bigWig file could hold (a bigWig needs at
    /// least one sequence).
    bool empty() const;
    void close();   ///< write() then commit(); throws IoError
    void write();   ///< writes the file under a temporary name beside the target; throws IoError
    void commit();  ///< renames the written file into place; throws IoError

private:
    struct Impl;
    std::unique_ptr<Impl> impl_;
};

/// Reads a bigWig file (merge reads the shards' tracks back). Errors are InputError naming the
/// file.
class BigWigReader {
public:
    struct Sequence {
        std::string name;
        int64_t length = 0;
    };
    struct Interval {
        int64_t start = 0, end = 0;
        float value = 0;  ///< as stored: bigWig values are float32
    };
    explicit BigWigReader(std::string path);
    ~BigWigReader();
    BigWigReader(const BigWigReader&) = delete;
    BigWigReader& operator=(const BigWigReader&) = delete;

    const std::string& path() const;
    /// The sequence list of the header, in file order.
    const std::vector<Sequence>& sequences() const;
    /// Calls f on every interval of `name` that overlaps [begin, end), in order, streaming
    /// (a per-base track of a long sequence need not fit in memory). A name absent from the
    /// sequence list has no intervals.
    void intervals(const std::string& name, int64_t begin, int64_t end,
                   const std::function<void(const Interval&)>& f);

private:
    struct Impl;
    std::unique_ptr<Impl> impl_;
};

enum class TrackFormat { bedgraph, bigwig };

/// Assembly gaps (sequence.hpp) are left out of posterior tracks: no data, rather than the
/// prior's posterior; short ambiguity runs inside sequence keep their values.
inline constexpr int64_t track_gap_min_length = assembly_gap_min_length;

struct TrackOptions {
    std::string prefix;  ///< files are PREFIX.REGION.bedgraph[.gz] or PREFIX.REGION.bw
    int digits = 3;      ///< decimals kept (0..12)
    int64_t bin = 1;     ///< average the posterior over bins of this many bases
    TrackFormat format = TrackFormat::bedgraph;
    bool bgzip = false;       ///< bedGraph only: BGZF-compress and tabix-index
    bool track_line = false;  ///< bedGraph only: start with a browser `track` line
    int threads = 1;          ///< threads compressing each file (bgzip: OutputFormat::threads)
};

/// Writes one posterior track per reportable region: P(region) per base (or bin mean), rounded
/// to `digits` decimals, consecutive equal values merged; intervals tile each decoded contig
/// except its runs of at least track_gap_min_length unknown bases (a bin wholly inside such runs
/// is left out; a bin partly inside takes the mean over its other bases).
/// Files appear at close().
///
/// A fork writes no file: it keeps its intervals (text, or bigWig records) in memory and, past
/// a few MiB, in an unnamed temporary file; join() appends them to this sink's files in order.
/// A fork that starts inside a contig (a later segment) holds back its first run, and its last
/// run stays open, so that equal values merge across the seam as in one sequential pass;
/// segment boundaries must fall on bin boundaries (DecoderOptions::segment_multiple).
class PosteriorTracks final : public DecodeSink {
public:
    PosteriorTracks(const Model& model, TrackOptions options);
    ~PosteriorTracks() override;
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig& contig, const DecodeResult& result) override;
    std::unique_ptr<DecodeSink> fork() const override;
    void join(DecodeSink& later) override;
    /// Writes the files. bigWig tracks of a run that decoded no sequence (a shard without
    /// records) are not written; `tidemark merge` does not look for them.
    void close();
    std::vector<std::string> paths() const;

private:
    struct Track;
    struct Sequence {
        std::string name;
        int64_t length = 0;
    };
    PosteriorTracks(const Model& model, TrackOptions options, bool forked);
    void add_value(Track& track, int64_t begin, int64_t end, double p);
    void per_base_values(Track& track, const BlockView& view);
    static double region_posterior(const Track& track, const double* row);
    void end_bin(Track& track, int64_t end);
    /// The parts of [begin, end) inside unknown runs of at least track_gap_min_length bases.
    void flush_run(Track& track);
    void append_output(Track& mine, Track& theirs, const PosteriorTracks& other, int64_t sequence);

    const Model& model_;
    TrackOptions options_;
    double scale_;
    bool forked_ = false;
    bool begun_ = false, ended_ = false;  ///< begin_contig / end_contig seen (for join)
    bool started_ = false;                ///< a block of the current span was seen
    const Contig* contig_ = nullptr;
    int sequence_ = -1;  ///< bigWig sequence index of the current contig (a fork: into sequences_)
    std::vector<Sequence> sequences_;  ///< a fork's contigs, for the bigWig sequence list at join
    std::vector<std::unique_ptr<Track>> tracks_;
    std::vector<std::pair<int64_t, int64_t>> gaps_;  ///< of the current block
};

}  // namespace tidemark
