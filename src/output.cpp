// Atomic output files (temporary name + rename) with signal-safe clean-up, checked writes,
// optional BGZF compression and tabix indexing (htslib).
#include "tidemark/output.hpp"

#include <fcntl.h>
#include <htslib/bgzf.h>
#include <htslib/hts.h>
#include <htslib/hts_endian.h>
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
#include <random>
#include <unordered_set>
#include <vector>

#include "tidemark/error.hpp"

// htslib's own writers (sam.c, vcf.c) index BGZF files as they write them with bgzf_idx_push:
// with compression threads a line's virtual offset is known only once its block is compressed,
// so the entry waits in the BGZF handle until then and is pushed into the index by the thread
// that writes the block. libhts exports it (since 1.10) but declares it in its internal header
// hts_internal.h, hence the declaration here.
extern "C" int bgzf_idx_push(BGZF* fp, hts_idx_t* hidx, int tid, hts_pos_t beg, hts_pos_t end,
                             uint64_t offset, int is_mapped);

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
    // The name is registered for the signal handler before the file exists (as mkstemp would
    // make it: six random characters, O_RDWR and O_EXCL, mode 0600): a signal between creating and
    // registering would otherwise leave the file behind. A name taken already is released
    // before the next is tried.
    static constexpr char alphabet[] =
        "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789";
    std::random_device random;
    for (int attempt = 0; attempt < 100 && fd_ < 0; ++attempt) {
        temp_ = dir + "." + base + ".tidemark-";
        for (int i = 0; i < 6; ++i) temp_ += alphabet[random() % (sizeof alphabet - 1)];
        slot_ = register_temp(temp_);
        fd_ = open(temp_.c_str(), O_RDWR | O_CREAT | O_EXCL, 0600);  // as mkstemp opens
        if (fd_ >= 0 || errno != EEXIST) break;
        release_temp(slot_);
        slot_ = -1;
    }
    if (fd_ < 0) {
        const int error = errno;
        release_temp(slot_);
        slot_ = -1;
        errno = error;
    }
    if (fd_ < 0 && errno == ENOENT)
        throw IoError(target_ + ": cannot create output file: its folder '" +
                      (dir.empty() ? "." : dir) + "' does not exist");
    if (fd_ < 0) throw IoError(target_ + ": cannot create output file: " + error_text());
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
        // Level 1 (libdeflate's fastest, through htslib): on a chrX bedGraph track it compresses
        // 11 times as fast as the default level 6 for a file 3% larger (0.11 s against 1.23 s of
        // CPU for 33 MB of text, bgzip -l 1 and -l 6), and compression was the largest cost
        // of a --bgzip run. Blocks hold the same text, so the decompressed file and what its
        // index covers are the same at any level.
        bgzf_ = bgzf_dopen(fd, "w1");
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
        if (format_.tabix) index_ = std::make_unique<LineIndex>();
        return;
    }
    file_ = stdout_ ? stdout : fdopen(fd, "wb");
    if (!file_) {
        close(fd);
        throw IoError(path_ + ": cannot open output file: " + error_text());
    }
    if (!stdout_) std::setvbuf(file_, nullptr, _IOFBF, 1 << 20);
}

// The tabix index (BED columns, TBI) of the lines written so far, built as tbx_index_build3 builds
// it from the finished file (htslib 1.16 tbx.c: tbx_index, get_intv) and byte for byte the same.
// Lines it does not expect (an unsorted or scattered sequence, a position past the TBI limit, a
// number tabix would read otherwise than as plain decimal) stop it, and the index is then built
// from the finished file as before, which gives tabix's result or its error.
struct OutputFile::LineIndex {
    // The virtual offset of a line's end within the first BGZF block is its byte count; later
    // ones depend on compressed sizes, known only as blocks are compressed.
    static constexpr uint64_t bgzf_block_bytes = 0xff00;  // BGZF_BLOCK_SIZE, bgzf.h
    static constexpr int64_t tbi_max_position = int64_t{1} << 29;

    hts_idx_t* index = nullptr;
    std::vector<std::string> names;  ///< in order of first appearance: tabix's sequence numbers
    std::unordered_set<std::string> seen;
    int64_t last_begin = 0;
    int64_t lines = 0;
    uint64_t written = 0;     ///< uncompressed bytes
    uint64_t header_end = 0;  ///< bytes up to the last skipped line before the first indexed one
    std::string partial;      ///< the part of a line written so far
    bool read_back = false;   ///< build the index from the finished file instead

    ~LineIndex() {
        if (index) hts_idx_destroy(index);
    }
};

OutputFile::~OutputFile() {
    if (!committed_) {
        if (bgzf_) bgzf_close(bgzf_);  // before index_ goes: its writer thread may push to it
        if (file_ && !stdout_) std::fclose(file_);
    }
}

namespace {

// A decimal as tbx_parse1's strtoll(.., 0) reads it when it is plain: digits, no sign, no
// leading zero (octal), at most 18 digits; -1 otherwise.
int64_t plain_decimal(std::string_view text) {
    if (text.empty() || text.size() > 18 || (text[0] == '0' && text.size() > 1)) return -1;
    int64_t v = 0;
    for (const char c : text) {
        if (c < '0' || c > '9') return -1;
        v = v * 10 + (c - '0');
    }
    return v;
}

}  // namespace

void OutputFile::index_line(std::string_view line) {
    LineIndex& x = *index_;
    ++x.lines;
    if (x.lines <= format_.skip_lines || (!line.empty() && line[0] == '#')) {
        if (!x.index) x.header_end = x.written;
        return;
    }
    const size_t tab1 = line.find('\t');
    const size_t tab2 = tab1 == std::string_view::npos ? tab1 : line.find('\t', tab1 + 1);
    if (tab2 == std::string_view::npos) {
        x.read_back = true;
        return;
    }
    const size_t tab3 = line.find('\t', tab2 + 1);
    const std::string_view name = line.substr(0, tab1);
    const int64_t begin = plain_decimal(line.substr(tab1 + 1, tab2 - tab1 - 1));
    const int64_t end = plain_decimal(
        line.substr(tab2 + 1, (tab3 == std::string_view::npos ? line.size() : tab3) - tab2 - 1));
    if (begin < 0 || end <= begin || end > LineIndex::tbi_max_position) {
        x.read_back = true;
        return;
    }
    if (x.names.empty() || name != x.names.back()) {
        std::string added(name);
        if (!x.seen.insert(added).second) {  // tabix: "chromosome blocks not continuous"
            x.read_back = true;
            return;
        }
        x.names.push_back(std::move(added));
    } else if (begin < x.last_begin) {  // tabix: "unsorted positions"
        x.read_back = true;
        return;
    }
    if (!x.index) {
        if (x.header_end >= LineIndex::bgzf_block_bytes) {
            x.read_back = true;
            return;
        }
        constexpr int tbi_min_shift = 14, tbi_levels = 5;  // tbx_index's TBI
        x.index = hts_idx_init(0, HTS_FMT_TBI, x.header_end, tbi_min_shift, tbi_levels);
        if (!x.index) throw IoError(path_ + ": cannot start its tabix index (out of memory?)");
    }
    x.last_begin = begin;
    const int tid = static_cast<int>(x.names.size() - 1);
    if (bgzf_idx_push(bgzf_, x.index, tid, begin, end, bgzf_tell(bgzf_), 1) != 0)
        x.read_back = true;
}

// Each line is handed to BGZF on its own and indexed at once: bgzf_idx_push takes the line's
// block from the handle's state.
void OutputFile::write_indexed(std::string_view data) {
    LineIndex& x = *index_;
    while (!data.empty() && !x.read_back) {
        const size_t newline = data.find('\n');
        const size_t n = newline == std::string_view::npos ? data.size() : newline + 1;
        if (bgzf_write(bgzf_, data.data(), n) != static_cast<ssize_t>(n))
            throw IoError(path_ + ": write failed: " + error_text());
        x.written += n;
        if (newline == std::string_view::npos) {
            x.partial.append(data);
            return;
        }
        std::string_view line = data.substr(0, newline);
        if (!x.partial.empty()) {
            x.partial.append(line);
            line = x.partial;
        }
        index_line(line);
        x.partial.clear();
        data.remove_prefix(n);
    }
    if (!data.empty() &&
        bgzf_write(bgzf_, data.data(), data.size()) != static_cast<ssize_t>(data.size()))
        throw IoError(path_ + ": write failed: " + error_text());
}

void OutputFile::write(std::string_view data) {
    if (committed_) throw InternalError(path_ + ": write after commit");
    if (data.empty()) return;
    if (index_ && !index_->read_back) return write_indexed(data);
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
    uint64_t end_offset = 0;  // of the data, where the EOF block starts
    if (bgzf_) {
        // Every block written, so every index entry pushed (bgzf_idx_push) and the offset known.
        if (index_ && !index_->read_back) {
            failed = bgzf_flush(bgzf_);
            end_offset = bgzf_tell(bgzf_);
        }
        failed |= bgzf_close(bgzf_);  // writes the EOF block and closes the descriptor
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
    // The index is written beside the temporary file, so that the data and its index are
    // renamed into place together or not at all.
    std::unique_ptr<StagedPath> index;
    std::string stale;  // the other kind of index, which tabix might otherwise read
    if (format_.tabix) {
        // A last line that ends a full block: its entry waits for a next block that never comes
        // (bgzf_idx_push); an unfinished last line: tabix reads it at the end of the file.
        if (index_ &&
            (index_->written % LineIndex::bgzf_block_bytes == 0 || !index_->partial.empty()))
            index_->read_back = true;
        index = index_ && !index_->read_back ? save_index(end_offset) : build_index();
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

// tbx_index's ending (htslib 1.16 tbx.c): the index finished at the offset of the data's end,
// and tabix's meta data (its configuration, then the sequence names) set (tbx_set_meta).
std::unique_ptr<StagedPath> OutputFile::save_index(uint64_t end_offset) {
    LineIndex& x = *index_;
    if (!x.index) {  // no line to index: tabix starts the index after the last skipped line
        constexpr int tbi_min_shift = 14, tbi_levels = 5;
        x.index = hts_idx_init(0, HTS_FMT_TBI, end_offset, tbi_min_shift, tbi_levels);
        if (!x.index) throw IoError(path_ + ": cannot start its tabix index (out of memory?)");
    }
    if (hts_idx_finish(x.index, end_offset) != 0)
        throw IoError(path_ + ": cannot finish its tabix index (out of memory?)");
    tbx_conf_t conf = tbx_conf_bed;
    conf.line_skip = format_.skip_lines;
    const int32_t fields[6] = {conf.preset, conf.sc,        conf.bc,
                               conf.ec,     conf.meta_char, conf.line_skip};
    std::vector<uint8_t> meta(28);
    uint32_t names_bytes = 0;
    for (const auto& n : x.names) names_bytes += static_cast<uint32_t>(n.size() + 1);
    for (int i = 0; i < 6; ++i) i32_to_le(fields[i], meta.data() + 4 * i);
    u32_to_le(names_bytes, meta.data() + 24);
    for (const auto& n : x.names) meta.insert(meta.end(), n.c_str(), n.c_str() + n.size() + 1);
    if (hts_idx_set_meta(x.index, static_cast<uint32_t>(meta.size()), meta.data(), 1) != 0)
        throw IoError(path_ + ": cannot finish its tabix index (out of memory?)");
    auto tbi = std::make_unique<StagedPath>(path_ + ".tbi");
    if (hts_idx_save_as(x.index, path_.c_str(), tbi->temp().c_str(), HTS_FMT_TBI) != 0)
        throw IoError(path_ + ".tbi: cannot write the tabix index: " + error_text());
    return tbi;
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
