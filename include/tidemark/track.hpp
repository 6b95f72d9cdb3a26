// Tracks: BED formatting of calls and bedGraph posterior tracks (run-length merged, quantised).
#pragma once

#include <memory>
#include <string>
#include <vector>

#include "tidemark/call.hpp"
#include "tidemark/output.hpp"

namespace tidemark {

/// The BED columns tidemark writes, in order (BED6+4).
inline constexpr const char* bed_columns[] = {
    "chrom", "start", "end", "name", "score", "strand",
    "mean_posterior", "min_posterior", "gc_fraction", "cpg_obs_exp"};

/// `#` header lines: tool version, profile, command line, column names.
std::string format_bed_header(const std::string& profile_name, const std::string& command_line);

/// One BED line for a call on `contig` (adds contig.offset to the coordinates).
/// score = round(1000 * mean posterior); strand "."; o/e "NA" when N(C)*N(G) = 0.
std::string format_bed_line(const Contig& contig, const Call& call, const std::string& region_name);

/// Writes one bedGraph per reportable region: PREFIX.REGION.bedgraph with P(region) per base,
/// rounded to `digits` decimals (0..12) and run-length merged; intervals tile each decoded
/// contig. Files are committed by close().
class PosteriorTracks final : public DecodeSink {
public:
    PosteriorTracks(const Model& model, const std::string& prefix, int digits);
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig& contig, const DecodeResult& result) override;
    void close();
    std::vector<std::string> paths() const;

private:
    struct Track {
        int region = 0;
        std::unique_ptr<OutputFile> file;
        std::string buffer;
        int64_t run_begin = 0, run_end = 0;
        int64_t run_value = -1;  ///< quantised value of the open run, -1 = none
    };
    void flush_run(Track& track);

    const Model& model_;
    int digits_;
    double scale_;
    const Contig* contig_ = nullptr;
    std::vector<Track> tracks_;
};

}  // namespace tidemark
