// Run resources (wall and CPU time, peak memory) and a progress line for terminals.
#pragma once

#include <chrono>
#include <cstdint>
#include <string>

#include "tidemark/decode.hpp"

namespace tidemark {

struct ResourceUsage {
    double wall_seconds = 0;
    double cpu_seconds = 0;       ///< user + system time of this process
    int64_t peak_rss_bytes = 0;   ///< maximum resident set size so far
};

/// Measures from its construction.
class Stopwatch {
public:
    Stopwatch();
    ResourceUsage now() const;

private:
    std::chrono::steady_clock::time_point start_;
    double cpu_start_;
};

/// A progress line on stderr, redrawn at most four times a second: contig, bases done of the
/// contig (and of the run when the total is known), Mbp/s, ETA. Draws nothing unless `enabled`
/// (the caller passes whether stderr is a terminal), so logs stay clean.
class ProgressMeter final : public DecodeSink {
public:
    /// total_bases: bases the run will decode, or 0 when unknown (streamed input).
    ProgressMeter(bool enabled, int64_t total_bases);
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig& contig, const DecodeResult& result) override;
    /// Erases the line (call before printing anything else to stderr).
    void finish();

    /// True when file descriptor 2 is a terminal and TERM is not "dumb".
    static bool stderr_is_terminal();

private:
    void draw(bool force);

    bool enabled_;
    int64_t total_;
    int64_t done_before_ = 0;  ///< bases of finished contigs
    int64_t contig_done_ = 0, contig_length_ = 0;
    std::string contig_name_;
    std::chrono::steady_clock::time_point start_, last_draw_;
    bool drawn_ = false;
};

}  // namespace tidemark
