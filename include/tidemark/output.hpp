// Outputs: files written to a temporary name and renamed into place only on success, or stdout;
// every write and the final close are checked.
#pragma once

#include <cstdint>
#include <cstdio>
#include <memory>
#include <string>
#include <string_view>

struct BGZF;

namespace tidemark {

/// How an output is encoded.
struct OutputFormat {
    bool bgzip = false;  ///< BGZF-compress (htslib), readable by gzip and indexable by tabix
    /// also write a tabix index (BED coordinates): PATH.tbi, or PATH.csi when a position is past
    /// the .tbi limit of 2^29; needs bgzip, a regular file
    bool tabix = false;
    int skip_lines = 0;  ///< leading lines the index must skip (a browser `track` line)
    /// bgzip: threads that compress BGZF blocks (and inflate them when an unusual file's index
    /// is read back); the bytes written are the same for any count, since blocks are cut and
    /// compressed alike
    int threads = 1;
};

/// A temporary path beside a target file, registered for removal on SIGINT/SIGTERM/SIGHUP.
/// commit() renames it over the target; otherwise the destructor removes it. For writers that
/// open files by name or descriptor themselves (tabix, the bigWig writer).
class StagedPath {
public:
    explicit StagedPath(std::string target);
    ~StagedPath();
    StagedPath(const StagedPath&) = delete;
    StagedPath& operator=(const StagedPath&) = delete;

    const std::string& temp() const { return temp_; }
    const std::string& target() const { return target_; }
    /// The descriptor of the created temporary file (caller takes ownership), or -1 once taken.
    int release_fd();
    /// Renames the temporary file over the target; throws IoError.
    void commit();

private:
    std::string target_, temp_;
    int fd_ = -1;
    int slot_ = -1;
    bool committed_ = false;
};

/// An output file ("-" = stdout). Data goes to a temporary file in the target's folder;
/// commit() flushes, closes and renames it over the target (with its tabix index, built while
/// the lines are written, or from the finished file when they are unusual, and written before
/// either is renamed, so that a failed index leaves the earlier files as they were). If commit() is
/// never reached (an exception, or SIGINT/SIGTERM with install_output_signal_handlers()), the
/// temporary file is removed and an existing target is left untouched. A target that is a device or
/// a FIFO (e.g. /dev/stdout) is written in place.
class OutputFile {
public:
    explicit OutputFile(std::string path, OutputFormat format = {});
    ~OutputFile();
    OutputFile(const OutputFile&) = delete;
    OutputFile& operator=(const OutputFile&) = delete;

    /// Appends bytes; throws IoError on failure (disk full, closed pipe).
    void write(std::string_view data);
    /// Finishes the file; throws IoError. Further writes are errors.
    void commit();
    const std::string& path() const { return path_; }
    bool is_stdout() const { return stdout_; }

private:
    struct LineIndex;
    void write_indexed(std::string_view data);
    void index_line(std::string_view line);
    std::unique_ptr<StagedPath> save_index(uint64_t end_offset);
    std::unique_ptr<StagedPath> build_index() const;

    std::string path_;
    std::unique_ptr<StagedPath> staged_;
    OutputFormat format_;
    std::FILE* file_ = nullptr;
    BGZF* bgzf_ = nullptr;
    bool stdout_ = false;
    bool committed_ = false;
    bool direct_ = false;               ///< target is a device or FIFO: written in place
    std::unique_ptr<LineIndex> index_;  ///< tabix: the index built as lines are written
};

/// A BGZF output (--bgzip) must be named FILE.gz or FILE.bgz, the endings by which browsers,
/// tabix and gzip tools recognise compressed files: throws UsageError naming `option` otherwise.
/// "-" (standard output) passes; see bgzip_to_stdout.
void check_bgzip_name(const std::string& path, const std::string& option);

/// --bgzip to standard output: throws UsageError when it is a terminal (compressed bytes would
/// fill the screen); otherwise returns the warning to show (no tabix index can be written there).
std::string bgzip_to_stdout(const std::string& option);

/// On SIGINT, SIGTERM or SIGHUP: remove every uncommitted temporary file, then die by the
/// signal. SIGPIPE is ignored so that a closed pipe surfaces as a reported write error.
void install_output_signal_handlers();

}  // namespace tidemark
