// Run resources (wall and CPU time, peak memory) and a progress line for terminals.
#pragma once

#include <chrono>
#include <cstdint>
#include <memory>
#include <string>

#include "tidemark/decode.hpp"

namespace tidemark {

struct ResourceUsage {
    double wall_seconds = 0;
    double cpu_seconds = 0;      ///< user + system time of this process
    int64_t peak_rss_bytes = 0;  ///< maximum resident set size so far
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

/// A progress line on stderr, redrawn at most four times a second: the contig last started,
/// bases decoded in the run (and the share of the total when known), Mbp/s, ETA. Draws nothing
/// unless `enabled` (the caller passes whether stderr is a terminal), so logs stay clean.
/// Forks share one set of counters (atomic), so decoding threads report into the same line.
class ProgressMeter final : public DecodeSink {
public:
    /// total_bases: bases the run will decode, or 0 when unknown (streamed input).
    ProgressMeter(bool enabled, int64_t total_bases);
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    std::unique_ptr<DecodeSink> fork() const override;
    /// Erases the line (call before printing anything else to stderr).
    void finish();
    /// Whether the line is drawn (forks of a meter that is not need not be decoded into).
    bool enabled() const;

    /// True when file descriptor 2 is a terminal and TERM is not "dumb".
    static bool stderr_is_terminal();

private:
    struct Shared;
    explicit ProgressMeter(std::shared_ptr<Shared> shared);
    void draw(bool force);

    std::shared_ptr<Shared> shared_;
};

}  // namespace tidemark
