// Atomic output files (temporary name + rename) with signal-safe clean-up, and checked writes.
#include "tidemark/output.hpp"

#include <atomic>
#include <cerrno>
#include <csignal>
#include <cstdlib>
#include <cstring>
#include <sys/stat.h>
#include <unistd.h>

#include "tidemark/error.hpp"

namespace tidemark {
namespace {

// Fixed table of temporary paths that a signal handler may unlink (async-signal-safe: no
// allocation, only atomics and unlink). Slots are claimed by OutputFile and released on
// commit or destruction.
constexpr int max_temps = 64;
constexpr size_t max_path = 4096;
char temp_paths[max_temps][max_path];
std::atomic<bool> temp_used[max_temps];

int register_temp(const std::string& path) {
    if (path.size() >= max_path) return -1;
    for (int i = 0; i < max_temps; ++i) {
        bool expected = false;
        if (temp_used[i].compare_exchange_strong(expected, true)) {
            std::memcpy(temp_paths[i], path.c_str(), path.size() + 1);
            return i;
        }
    }
    return -1;
}

void release_temp(int slot) {
    if (slot >= 0) temp_used[slot].store(false);
}

extern "C" void remove_temps_and_die(int sig) {
    for (int i = 0; i < max_temps; ++i)
        if (temp_used[i].load()) unlink(temp_paths[i]);
    std::signal(sig, SIG_DFL);
    std::raise(sig);
}

std::string error_text() { return std::strerror(errno); }

}  // namespace

void install_output_signal_handlers() {
    std::signal(SIGINT, remove_temps_and_die);
    std::signal(SIGTERM, remove_temps_and_die);
    std::signal(SIGHUP, remove_temps_and_die);
    std::signal(SIGPIPE, SIG_IGN);
}

OutputFile::OutputFile(std::string path) : path_(std::move(path)) {
    if (path_.empty() || path_ == "-") {
        path_ = "-";
        file_ = stdout;
        return;
    }
    struct stat st{};
    if (stat(path_.c_str(), &st) == 0 && !S_ISREG(st.st_mode)) {
        if (S_ISDIR(st.st_mode)) throw IoError(path_ + ": is a folder, not a file");
        // A device or FIFO (/dev/stdout, /dev/full, a named pipe) cannot be replaced by
        // renaming; write to it directly.
        file_ = std::fopen(path_.c_str(), "wb");
        if (!file_) throw IoError(path_ + ": cannot open output: " + error_text());
        direct_ = true;
        return;
    }
    const size_t slash = path_.rfind('/');
    const std::string dir = slash == std::string::npos ? "" : path_.substr(0, slash + 1);
    const std::string base = slash == std::string::npos ? path_ : path_.substr(slash + 1);
    if (base.empty()) throw IoError(path_ + ": output path names a folder, not a file");
    std::string pattern = dir + "." + base + ".tidemark-XXXXXX";
    const int fd = mkstemp(pattern.data());
    if (fd < 0) throw IoError(path_ + ": cannot create output file: " + error_text());
    temp_ = pattern;
    slot_ = register_temp(temp_);
    file_ = fdopen(fd, "wb");
    if (!file_) {
        close(fd);
        unlink(temp_.c_str());
        release_temp(slot_);
        throw IoError(path_ + ": cannot open output file: " + error_text());
    }
    std::setvbuf(file_, nullptr, _IOFBF, 1 << 20);
}

OutputFile::~OutputFile() {
    if (direct_ && !committed_ && file_) std::fclose(file_);
    if (committed_ || is_stdout() || direct_) return;
    if (file_) std::fclose(file_);
    unlink(temp_.c_str());
    release_temp(slot_);
}

void OutputFile::write(std::string_view data) {
    if (committed_) throw InternalError(path_ + ": write after commit");
    if (data.empty()) return;
    if (std::fwrite(data.data(), 1, data.size(), file_) != data.size())
        throw IoError((is_stdout() ? std::string("standard output") : path_) +
                      ": write failed: " + error_text());
}

void OutputFile::commit() {
    if (committed_) return;
    const std::string shown = is_stdout() ? std::string("standard output") : path_;
    if (std::fflush(file_) != 0 || std::ferror(file_))
        throw IoError(shown + ": write failed: " + error_text());
    committed_ = true;
    if (is_stdout()) return;
    const int closed = std::fclose(file_);
    file_ = nullptr;
    if (closed != 0) {
        committed_ = false;
        throw IoError(shown + ": write failed on close: " + error_text());
    }
    if (direct_) return;
    // mkstemp creates 0600; give the file the permissions a normal create would have.
    const mode_t mask = umask(0);
    umask(mask);
    chmod(temp_.c_str(), 0666 & ~mask);
    if (std::rename(temp_.c_str(), path_.c_str()) != 0) {
        committed_ = false;
        throw IoError(shown + ": cannot move the finished file into place: " + error_text());
    }
    release_temp(slot_);
}

}  // namespace tidemark
