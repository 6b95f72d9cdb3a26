// Resource measurement (getrusage) and the terminal progress line.
#include "tidemark/progress.hpp"

#include <fmt/format.h>
#include <sys/resource.h>
#include <unistd.h>

#include <cstdio>
#include <cstdlib>
#include <cstring>

namespace tidemark {
namespace {

double cpu_seconds() {
    rusage ru{};
    getrusage(RUSAGE_SELF, &ru);
    return static_cast<double>(ru.ru_utime.tv_sec + ru.ru_stime.tv_sec) +
           static_cast<double>(ru.ru_utime.tv_usec + ru.ru_stime.tv_usec) * 1e-6;
}

// VmHWM from /proc/self/status rather than getrusage's ru_maxrss, which Linux carries over
// from the parent process across exec (a tool started by a big process would report its size).
int64_t peak_rss_bytes() {
    std::FILE* f = std::fopen("/proc/self/status", "r");
    if (!f) return 0;
    char line[256];
    long long kib = 0;
    while (std::fgets(line, sizeof line, f))
        if (std::sscanf(line, "VmHWM: %lld kB", &kib) == 1) break;
    std::fclose(f);
    return static_cast<int64_t>(kib) * 1024;
}

std::string clock_text(double seconds) {
    const auto s = static_cast<int64_t>(seconds + 0.5);
    return fmt::format("{}:{:02}:{:02}", s / 3600, (s / 60) % 60, s % 60);
}

}  // namespace

Stopwatch::Stopwatch() : start_(std::chrono::steady_clock::now()), cpu_start_(cpu_seconds()) {}

ResourceUsage Stopwatch::now() const {
    ResourceUsage u;
    u.wall_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start_).count();
    u.cpu_seconds = cpu_seconds() - cpu_start_;
    u.peak_rss_bytes = peak_rss_bytes();
    return u;
}

bool ProgressMeter::stderr_is_terminal() {
    const char* term = std::getenv("TERM");
    return isatty(STDERR_FILENO) == 1 && !(term && std::strcmp(term, "dumb") == 0);
}

ProgressMeter::ProgressMeter(bool enabled, int64_t total_bases)
    : enabled_(enabled), total_(total_bases), start_(std::chrono::steady_clock::now()) {}

void ProgressMeter::begin_contig(const Contig& contig) {
    contig_name_ = contig.name;
    contig_length_ = contig.length;
    contig_done_ = 0;
    draw(true);
}

void ProgressMeter::block(const BlockView& view) {
    contig_done_ = view.begin + view.size;
    draw(false);
}

void ProgressMeter::end_contig(const Contig& contig, const DecodeResult&) {
    done_before_ += contig.length;
    contig_done_ = 0;
    contig_length_ = 0;
}

void ProgressMeter::draw(bool force) {
    if (!enabled_) return;
    const auto now = std::chrono::steady_clock::now();
    if (!force && now - last_draw_ < std::chrono::milliseconds(250)) return;
    last_draw_ = now;
    const double elapsed = std::chrono::duration<double>(now - start_).count();
    const int64_t done = done_before_ + contig_done_;
    const double rate = elapsed > 0 ? static_cast<double>(done) / elapsed : 0;  // bases/s
    std::string line = fmt::format("tidemark: {}  {:.1f}/{:.1f} Mbp", contig_name_,
                                   static_cast<double>(contig_done_) / 1e6, static_cast<double>(contig_length_) / 1e6);
    if (total_ > 0) line += fmt::format("  (run {:.1f}%)", 100.0 * static_cast<double>(done) / static_cast<double>(total_));
    line += fmt::format("  {:.1f} Mbp/s", rate / 1e6);
    const int64_t remaining = total_ > 0 ? total_ - done : contig_length_ - contig_done_;
    if (rate > 0 && remaining > 0) line += "  ETA " + clock_text(static_cast<double>(remaining) / rate);
    std::fprintf(stderr, "\r%-100s", line.c_str());
    std::fflush(stderr);
    drawn_ = true;
}

void ProgressMeter::finish() {
    if (!drawn_) return;
    std::fprintf(stderr, "\r%-100s\r", "");
    std::fflush(stderr);
    drawn_ = false;
}

}  // namespace tidemark
