// Atomic output files (temporary name + rename) with signal-safe clean-up, checked writes,
// optional BGZF compression and tabix indexing (htslib).
#include "tidemark/output.hpp"

#include <fcntl.h>
#include <htslib/bgzf.h>
#include <htslib/tbx.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <csignal>
#include <cstdio>
#include <cstdlib>
#include <cstring>

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

std::string error_text() {
    return std::strerror(errno);
}

// mkstemp creates 0600; give finished files the permissions a normal create would have.
void set_default_mode(const std::string& path) {
    const mode_t mask = umask(0);
    umask(mask);
    chmod(path.c_str(), 0666 & ~mask);
}

}  // namespace

void check_bgzip_name(const std::string& path, const std::string& option) {
    const auto ends_with = [&](const char* end) {
        const size_t n = std::strlen(end);
        return path.size() > n && path.compare(path.size() - n, n, end) == 0;
    };
    if (path.empty() || path == "-" || ends_with(".gz") || ends_with(".bgz")) return;
    throw UsageError(option + " '" + path + "': --bgzip writes it compressed (BGZF), so name it '" +
                     path +
                     ".gz': browsers, tabix and zcat recognise compressed files by that ending");
}

std::string bgzip_to_stdout(const std::string& option) {
    if (isatty(STDOUT_FILENO))
        throw UsageError("--bgzip would write compressed bytes to the terminal; give " + option +
                         " FILE.gz");
    return "--bgzip to standard output: compressed (BGZF) without a tabix index, which needs a "
           "file; give " +
           option + " FILE.gz for both, or index the stream's file with 'tabix -p bed'";
}

void install_output_signal_handlers() {
    std::signal(SIGINT, remove_temps_and_die);
    std::signal(SIGTERM, remove_temps_and_die);
    std::signal(SIGHUP, remove_temps_and_die);
    std::signal(SIGPIPE, SIG_IGN);
}

StagedPath::StagedPath(std::string target) : target_(std::move(target)) {
    const size_t slash = target_.rfind('/');
    const std::string dir = slash == std::string::npos ? "" : target_.substr(0, slash + 1);
    const std::string base = slash == std::string::npos ? target_ : target_.substr(slash + 1);
    if (base.empty()) throw IoError(target_ + ": output path names a folder, not a file");
    temp_ = dir + "." + base + ".tidemark-XXXXXX";
    fd_ = mkstemp(temp_.data());
    if (fd_ < 0 && errno == ENOENT)
        throw IoError(target_ + ": cannot create output file: its folder '" +
                      (dir.empty() ? "." : dir) + "' does not exist");
    if (fd_ < 0) throw IoError(target_ + ": cannot create output file: " + error_text());
    slot_ = register_temp(temp_);
}

StagedPath::~StagedPath() {
    if (fd_ >= 0) close(fd_);
    if (!committed_) unlink(temp_.c_str());
    release_temp(slot_);
}

int StagedPath::release_fd() {
    const int fd = fd_;
    fd_ = -1;
    return fd;
}

void StagedPath::commit() {
    if (fd_ >= 0) {
        close(fd_);
        fd_ = -1;
    }
    set_default_mode(temp_);
    if (std::rename(temp_.c_str(), target_.c_str()) != 0)
        throw IoError(target_ + ": cannot move the finished file into place: " + error_text());
    committed_ = true;
    release_temp(slot_);
    slot_ = -1;
}

OutputFile::OutputFile(std::string path, OutputFormat format)
    : path_(std::move(path)), format_(format) {
    int fd = -1;
    if (path_.empty() || path_ == "-") {
        path_ = "-";
        stdout_ = true;
        format_.tabix = false;
        fd = format_.bgzip ? dup(STDOUT_FILENO) : -1;
    } else {
        struct stat st {};
        if (stat(path_.c_str(), &st) == 0 && !S_ISREG(st.st_mode)) {
            if (S_ISDIR(st.st_mode)) throw IoError(path_ + ": is a folder, not a file");
            // A device or FIFO (/dev/stdout, /dev/full, a named pipe) cannot be replaced by
            // renaming; write to it directly.
            fd = open(path_.c_str(), O_WRONLY);
            if (fd < 0) throw IoError(path_ + ": cannot open output: " + error_text());
            direct_ = true;
            format_.tabix = false;
        } else {
            staged_ = std::make_unique<StagedPath>(path_);
            fd = staged_->release_fd();
        }
    }
    if (format_.tabix && !format_.bgzip) throw InternalError("tabix index without bgzip");
    if (format_.bgzip) {
        bgzf_ = bgzf_dopen(fd, "w");
        if (!bgzf_) {
            close(fd);
            throw IoError(path_ + ": cannot open compressed output");
        }
        // Blocks are cut at the same bytes whatever the thread count and each is compressed on
        // its own, so the file is the same; compression leaves the thread that formats lines.
        // 64 blocks (4 MiB of text) a thread: the low end of what bgzf.h recommends.
        if (format_.threads > 1 && bgzf_mt(bgzf_, format_.threads, 64) != 0) {
            bgzf_close(bgzf_);
            bgzf_ = nullptr;
            throw IoError(path_ + ": cannot start the compression threads");
        }
        return;
    }
    file_ = stdout_ ? stdout : fdopen(fd, "wb");
    if (!file_) {
        close(fd);
        throw IoError(path_ + ": cannot open output file: " + error_text());
    }
    if (!stdout_) std::setvbuf(file_, nullptr, _IOFBF, 1 << 20);
}

OutputFile::~OutputFile() {
    if (!committed_) {
        if (bgzf_) bgzf_close(bgzf_);
        if (file_ && !stdout_) std::fclose(file_);
    }
}

void OutputFile::write(std::string_view data) {
    if (committed_) throw InternalError(path_ + ": write after commit");
    if (data.empty()) return;
    const bool ok =
        bgzf_ ? bgzf_write(bgzf_, data.data(), data.size()) == static_cast<ssize_t>(data.size())
              : std::fwrite(data.data(), 1, data.size(), file_) == data.size();
    if (!ok)
        throw IoError((stdout_ ? std::string("standard output") : path_) +
                      ": write failed: " + error_text());
}

void OutputFile::commit() {
    if (committed_) return;
    const std::string shown = stdout_ ? std::string("standard output") : path_;
    int failed = 0;
    if (bgzf_) {
        failed = bgzf_close(bgzf_);  // writes the EOF block and closes the descriptor
        bgzf_ = nullptr;
    } else if (stdout_) {
        failed = std::fflush(file_) != 0 || std::ferror(file_);
    } else {
        failed = std::fflush(file_) != 0 || std::ferror(file_);
        failed |= std::fclose(file_) != 0;
        file_ = nullptr;
    }
    if (failed) throw IoError(shown + ": write failed: " + error_text());
    if (stdout_ || direct_) {
        committed_ = true;
        return;
    }
    // The index is built from the temporary file, so that the data and its index are renamed
    // into place together or not at all.
    std::unique_ptr<StagedPath> index;
    std::string stale;  // the other kind of index, which tabix might otherwise read
    if (format_.tabix) {
        index = build_index();
        stale = path_ + (index->target().size() >= 4 &&
                                 index->target().compare(index->target().size() - 4, 4, ".csi") == 0
                             ? ".tbi"
                             : ".csi");
    }
    staged_->commit();
    committed_ = true;
    if (index) {
        index->commit();
        std::remove(stale.c_str());
    }
}

// TBI where every position fits its 2^29 limit, since it is the index every tabix reader knows;
// CSI past it. htslib 1.16 gives a CSI index of a BED-like file (tbx_index_build3) as many
// levels as fit 2^33 bases with 2^15-base bins (tabix -C -m 15), 2^32 with the default 2^14.
std::unique_ptr<StagedPath> OutputFile::build_index() const {
    tbx_conf_t conf = tbx_conf_bed;
    conf.line_skip = format_.skip_lines;
    const int threads = std::max(1, format_.threads);  // inflate blocks ahead of the parser
    auto tbi = std::make_unique<StagedPath>(path_ + ".tbi");
    if (tbx_index_build3(staged_->temp().c_str(), tbi->temp().c_str(), 0, threads, &conf) == 0)
        return tbi;
    tbi.reset();
    constexpr int csi_min_shift = 15;
    auto csi = std::make_unique<StagedPath>(path_ + ".csi");
    if (tbx_index_build3(staged_->temp().c_str(), csi->temp().c_str(), csi_min_shift, threads,
                         &conf) == 0)
        return csi;
    throw IoError(path_ + ": cannot write its tabix index (" + path_ +
                  ".tbi or .csi): lines out of position order within a sequence, or a position "
                  "past 2^33 (8,589,934,592), the most a CSI index reaches here. Nothing was "
                  "written");
}

}  // namespace tidemark
