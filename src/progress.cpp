// Resource measurement (getrusage) and the terminal progress line.
#include "tidemark/progress.hpp"

#include <fmt/format.h>
#include <sys/resource.h>
#include <unistd.h>

#include <atomic>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <mutex>

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
    u.wall_seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start_).count();
    u.cpu_seconds = cpu_seconds() - cpu_start_;
    u.peak_rss_bytes = peak_rss_bytes();
    return u;
}

bool ProgressMeter::stderr_is_terminal() {
    const char* term = std::getenv("TERM");
    return isatty(STDERR_FILENO) == 1 && !(term && std::strcmp(term, "dumb") == 0);
}

struct ProgressMeter::Shared {
    bool enabled = false;
    int64_t total = 0;
    std::atomic<int64_t> done{0};  ///< bases decoded so far, all threads
    std::chrono::steady_clock::time_point start;
    std::mutex mutex;  ///< guards the fields below and the drawing
    std::string contig_name;
    int64_t contig_length = 0;
    std::chrono::steady_clock::time_point last_draw;
    bool drawn = false;
};

ProgressMeter::ProgressMeter(bool enabled, int64_t total_bases)
    : shared_(std::make_shared<Shared>()) {
    shared_->enabled = enabled;
    shared_->total = total_bases;
    shared_->start = std::chrono::steady_clock::now();
}

ProgressMeter::ProgressMeter(std::shared_ptr<Shared> shared) : shared_(std::move(shared)) {}

std::unique_ptr<DecodeSink> ProgressMeter::fork() const {
    return std::unique_ptr<DecodeSink>(new ProgressMeter(shared_));
}

void ProgressMeter::begin_contig(const Contig& contig) {
    if (!shared_->enabled) return;
    {
        std::lock_guard<std::mutex> lock(shared_->mutex);
        shared_->contig_name = contig.name;
        shared_->contig_length = contig.length;
    }
    draw(true);
}

bool ProgressMeter::enabled() const {
    return shared_->enabled;
}

void ProgressMeter::block(const BlockView& view) {
    if (!shared_->enabled) return;
    shared_->done.fetch_add(view.size, std::memory_order_relaxed);
    draw(false);
}

void ProgressMeter::draw(bool force) {
    Shared& sh = *shared_;
    if (!sh.enabled) return;
    // Another thread drawing right now is as good as drawing.
    std::unique_lock<std::mutex> lock(sh.mutex, std::try_to_lock);
    if (!lock.owns_lock()) return;
    const auto now = std::chrono::steady_clock::now();
    if (!force && now - sh.last_draw < std::chrono::milliseconds(250)) return;
    sh.last_draw = now;
    const double elapsed = std::chrono::duration<double>(now - sh.start).count();
    const int64_t done = sh.done.load(std::memory_order_relaxed);
    const double rate = elapsed > 0 ? static_cast<double>(done) / elapsed : 0;  // bases/s
    std::string line =
        fmt::format("tidemark: {} ({:.1f} Mbp)  {:.1f} Mbp done", sh.contig_name,
                    static_cast<double>(sh.contig_length) / 1e6, static_cast<double>(done) / 1e6);
    if (sh.total > 0)
        line += fmt::format("  (run {:.1f}%)",
                            100.0 * static_cast<double>(done) / static_cast<double>(sh.total));
    line += fmt::format("  {:.1f} Mbp/s", rate / 1e6);
    const int64_t remaining = sh.total - done;
    if (sh.total > 0 && rate > 0 && remaining > 0)
        line += "  ETA " + clock_text(static_cast<double>(remaining) / rate);
    std::fprintf(stderr, "\r%-100s", line.c_str());
    std::fflush(stderr);
    sh.drawn = true;
}

void ProgressMeter::finish() {
    std::lock_guard<std::mutex> lock(shared_->mutex);
    if (!shared_->drawn) return;
    std::fprintf(stderr, "\r%-100s\r", "");
    std::fflush(stderr);
    shared_->drawn = false;
}

}  // namespace tidemark
