// Byte sources: htslib for plain text and bgzip, ISA-L for gzip, Boost.Iostreams for xz and
// bzip2, libzstd for zstd; optionally decompressed ahead of the reader on a thread of its own.
#include "byte_source.hpp"

#include <htslib/bgzf.h>
#include <htslib/hfile.h>
#include <isa-l/igzip_lib.h>
#include <sys/stat.h>
#include <zstd.h>

#include <atomic>
#include <boost/iostreams/filter/bzip2.hpp>
#include <boost/iostreams/filter/lzma.hpp>
#include <boost/iostreams/filtering_stream.hpp>
#include <cerrno>
#include <condition_variable>
#include <cstring>
#include <deque>
#include <mutex>
#include <thread>
#include <vector>

#if defined(__x86_64__)
#include <immintrin.h>
#endif

#include "tidemark/error.hpp"

namespace tidemark::detail {
namespace {

std::string display_name(const std::string& path) {
    return path == "-" ? "<stdin>" : path;
}

class BgzfSource final : public ByteSource {
public:
    BgzfSource(hFILE* hf, std::string path) : path_(std::move(path)) {
        fp_ = bgzf_hopen(hf, "r");
        if (!fp_) {
            hclose_abruptly(hf);
            throw InputError(display_name(path_) + ": cannot open for reading");
        }
        // A bgzip file normally ends with an empty EOF block; without it the file was most
        // likely cut short (an interrupted copy or download).
        if (path_ != "-" && bgzf_compression(fp_) == 2 && bgzf_check_EOF(fp_) == 0) {
            bgzf_close(fp_);
            throw InputError(path_ +
                             ": bgzip file has no end-of-file marker: it is probably "
                             "truncated");
        }
    }
    ~BgzfSource() override { bgzf_close(fp_); }
    size_t read(char* buf, size_t n) override {
        const ssize_t got = bgzf_read(fp_, buf, n);
        if (got < 0)
            throw InputError(display_name(path_) +
                             ": read failed (truncated or corrupt compressed data?)");
        return static_cast<size_t>(got);
    }
    bool seek(int64_t offset) override {
        if (path_ == "-" || bgzf_compression(fp_) == 1) return false;
        if (bgzf_compression(fp_) == 2 && !index_loaded_) {
            if (bgzf_index_load(fp_, path_.c_str(), ".gzi") != 0) return false;
            index_loaded_ = true;
        }
        return bgzf_useek(fp_, offset, SEEK_SET) == 0;
    }

private:
    BGZF* fp_ = nullptr;
    std::string path_;
    bool index_loaded_ = false;
};

// Boost.Iostreams source device that reads through an htslib hFILE (which already holds the
// bytes we peeked at, and handles stdin).
class HfileDevice {
public:
    using char_type = char;
    using category = boost::iostreams::source_tag;
    explicit HfileDevice(hFILE* hf) : hf_(hf) {}
    std::streamsize read(char* s, std::streamsize n) {
        const ssize_t got = hread(hf_, s, static_cast<size_t>(n));
        if (got < 0) throw std::ios_base::failure("read error");
        return got == 0 ? -1 : got;
    }

private:
    hFILE* hf_;
};

class BoostSource final : public ByteSource {
public:
    enum class Kind { xz, bzip2 };
    BoostSource(hFILE* hf, Kind kind, std::string path) : hf_(hf), path_(std::move(path)) {
        switch (kind) {
            case Kind::xz:
                in_.push(boost::iostreams::lzma_decompressor());
                break;
            case Kind::bzip2:
                in_.push(boost::iostreams::bzip2_decompressor());
                break;
        }
        in_.push(HfileDevice(hf_));
    }
    ~BoostSource() override {
        in_.reset();
        hclose_abruptly(hf_);
    }
    size_t read(char* buf, size_t n) override {
        try {
            in_.read(buf, static_cast<std::streamsize>(n));
            if (in_.bad()) throw std::ios_base::failure("bad stream");
            return static_cast<size_t>(in_.gcount());
        } catch (const std::exception&) {
            throw InputError(display_name(path_) +
                             ": read failed (truncated or corrupt compressed data?)");
        }
    }

private:
    hFILE* hf_;
    std::string path_;
    boost::iostreams::filtering_istream in_;
};

// zstd through libzstd itself: Boost.Iostreams' zstd filter ends a stream cut inside a frame as
// if it were complete, so a truncated file read as a shorter one.
class ZstdSource final : public ByteSource {
public:
    ZstdSource(hFILE* hf, std::string path)
        : hf_(hf),
          path_(std::move(path)),
          stream_(ZSTD_createDStream()),
          in_(ZSTD_DStreamInSize()) {
        if (!stream_) {
            hclose_abruptly(hf_);
            throw InputError(display_name(path_) + ": cannot start the zstd decoder");
        }
    }
    ~ZstdSource() override {
        ZSTD_freeDStream(stream_);
        hclose_abruptly(hf_);
    }
    size_t read(char* buf, size_t n) override {
        ZSTD_outBuffer out{buf, n, 0};
        while (out.pos == 0) {
            if (input_.pos == input_.size) {
                const ssize_t got = hread(hf_, in_.data(), in_.size());
                if (got < 0) throw InputError(display_name(path_) + ": read failed");
                if (got == 0) {
                    // 0 from the last call: every frame is complete.
                    if (frame_open_)
                        throw InputError(display_name(path_) +
                                         ": zstd data ends inside a frame: the file is truncated "
                                         "(an interrupted copy or download?)");
                    return 0;
                }
                input_ = ZSTD_inBuffer{in_.data(), static_cast<size_t>(got), 0};
            }
            const size_t hint = ZSTD_decompressStream(stream_, &out, &input_);
            if (ZSTD_isError(hint))
                throw InputError(display_name(path_) + ": corrupt zstd data (" +
                                 ZSTD_getErrorName(hint) + ")");
            frame_open_ = hint != 0;
        }
        return out.pos;
    }

private:
    hFILE* hf_;
    std::string path_;
    ZSTD_DStream* stream_;
    std::vector<char> in_;
    ZSTD_inBuffer input_{nullptr, 0, 0};
    bool frame_open_ = false;
};

#if defined(__x86_64__)
// ISA-L's inflate uses AVX registers and may return with their upper halves in use. Until they
// are cleared, every legacy-SSE instruction of the decoder (compiled for baseline x86-64) pays a
// merge penalty: chrX .fa.gz decoded on the reading thread took 3x the time of plain text.
__attribute__((target("avx"))) void clear_upper_avx_state() {
    _mm256_zeroupper();
}
const bool cpu_has_avx = __builtin_cpu_supports("avx");
#endif

// Plain gzip (one member or several, not bgzip) through ISA-L's streaming inflate, which is
// several times as fast as zlib's on this input (measured: scripts/bench.sh, chrX .fa.gz); the
// gzip header, CRC-32 and length of every member are checked.
class GzipSource final : public ByteSource {
public:
    GzipSource(hFILE* hf, std::string path)
        : hf_(hf), path_(std::move(path)), in_(new uint8_t[in_size]) {
        isal_inflate_init(&state_);
        state_.crc_flag = ISAL_GZIP;
    }
    ~GzipSource() override { hclose_abruptly(hf_); }
    size_t read(char* buf, size_t n) override {
        size_t done = 0;
        while (done < n) {
            if (state_.block_state == ISAL_BLOCK_FINISH) {  // a member ended: another, or the end
                if (!fill()) return done;
                isal_inflate_reset(&state_);
                state_.crc_flag = ISAL_GZIP;
            }
            if (state_.avail_in == 0 && !fill()) throw corrupt();  // the input ends inside a member
            state_.next_out = reinterpret_cast<uint8_t*>(buf) + done;
            state_.avail_out = static_cast<uint32_t>(std::min<size_t>(n - done, uint32_t{1} << 30));
            const int status = isal_inflate(&state_);
#if defined(__x86_64__)
            if (cpu_has_avx) clear_upper_avx_state();
#endif
            if (status != ISAL_DECOMP_OK) throw corrupt();
            done = static_cast<size_t>(state_.next_out - reinterpret_cast<uint8_t*>(buf));
        }
        return done;
    }

private:
    static constexpr size_t in_size = size_t{1} << 18;
    bool fill() {
        if (state_.avail_in > 0) return true;
        const ssize_t got = hread(hf_, in_.get(), in_size);
        if (got < 0) throw corrupt();
        state_.next_in = in_.get();
        state_.avail_in = static_cast<uint32_t>(got);
        return got > 0;
    }
    InputError corrupt() const {
        return InputError(display_name(path_) +
                          ": read failed (truncated or corrupt compressed data?)");
    }
    hFILE* hf_;
    std::string path_;
    std::unique_ptr<uint8_t[]> in_;
    inflate_state state_{};
};

std::atomic<int> helper_threads{0};

// Reads another source to its end on a thread of its own, a few buffers ahead of the reader, so
// that decompression and parsing run at the same time.
class ReadAheadSource final : public ByteSource {
public:
    explicit ReadAheadSource(std::unique_ptr<ByteSource> inner) : inner_(std::move(inner)) {
        thread_ = std::thread([this] { fill(); });
    }
    ~ReadAheadSource() override {
        {
            std::lock_guard<std::mutex> lock(mutex_);
            stop_ = true;
        }
        changed_.notify_all();
        thread_.join();
    }
    size_t read(char* buf, size_t n) override {
        size_t done = 0;
        while (done < n) {
            if (at_ == current_.size()) {
                std::unique_lock<std::mutex> lock(mutex_);
                if (!current_.empty()) free_.push_back(std::move(current_));
                current_.clear();
                at_ = 0;
                changed_.notify_all();
                changed_.wait(lock, [&] { return !ready_.empty() || ended_; });
                if (ready_.empty()) {
                    if (error_) std::rethrow_exception(error_);
                    return done;
                }
                current_ = std::move(ready_.front());
                ready_.pop_front();
                at_ = 0;
            }
            const size_t take = std::min(n - done, current_.size() - at_);
            std::memcpy(buf + done, current_.data() + at_, take);
            at_ += take;
            done += take;
        }
        return done;
    }

private:
    static constexpr size_t buffer_size = size_t{1} << 20;
    static constexpr size_t buffers_ahead = 4;
    void fill() {
        for (;;) {
            std::vector<char> buffer;
            {
                std::unique_lock<std::mutex> lock(mutex_);
                changed_.wait(lock, [&] { return stop_ || ready_.size() < buffers_ahead; });
                if (stop_) return;
                if (!free_.empty()) {
                    buffer = std::move(free_.back());
                    free_.pop_back();
                }
            }
            buffer.resize(buffer_size);
            size_t got = 0;
            std::exception_ptr error;
            try {
                got = inner_->read(buffer.data(), buffer.size());
            } catch (...) {
                error = std::current_exception();
            }
            std::lock_guard<std::mutex> lock(mutex_);
            if (error || got == 0) {
                error_ = error;
                ended_ = true;
                changed_.notify_all();
                return;
            }
            buffer.resize(got);
            ready_.push_back(std::move(buffer));
            changed_.notify_all();
        }
    }

    std::unique_ptr<ByteSource> inner_;
    std::mutex mutex_;
    std::condition_variable changed_;
    std::deque<std::vector<char>> ready_;
    std::vector<std::vector<char>> free_;
    std::vector<char> current_;
    size_t at_ = 0;
    bool stop_ = false, ended_ = false;
    std::exception_ptr error_;
    std::thread thread_;  ///< last: started when everything else exists
};

std::unique_ptr<ByteSource> open_unwrapped(const std::string& path, bool& compressed);

}  // namespace

void set_decompression_threads(int threads) {
    helper_threads = std::max(0, threads);
}
int decompression_threads() {
    return helper_threads;
}

std::unique_ptr<ByteSource> open_byte_source(const std::string& path, bool sequential) {
    bool compressed = false;
    std::unique_ptr<ByteSource> source = open_unwrapped(path, compressed);
    if (sequential && compressed && helper_threads > 0)
        return std::make_unique<ReadAheadSource>(std::move(source));
    return source;
}

namespace {

std::unique_ptr<ByteSource> open_unwrapped(const std::string& path, bool& compressed) {
    if (path != "-") {
        struct stat st {};
        if (stat(path.c_str(), &st) != 0)
            throw InputError(path + ": cannot open: " + std::strerror(errno));
        if (S_ISDIR(st.st_mode)) throw InputError(path + ": is a directory, not a sequence file");
    }
    hFILE* hf = hopen(path.c_str(), "r");
    if (!hf) throw InputError(display_name(path) + ": cannot open: " + std::strerror(errno));
    unsigned char magic[18] = {};
    const ssize_t got = hpeek(hf, magic, sizeof magic);
    if (got < 0) {
        hclose_abruptly(hf);
        throw InputError(display_name(path) + ": cannot read");
    }
    static const unsigned char xz[6] = {0xFD, '7', 'z', 'X', 'Z', 0x00};
    static const unsigned char zstd[4] = {0x28, 0xB5, 0x2F, 0xFD};
    compressed = true;
    if (got >= 6 && std::memcmp(magic, xz, 6) == 0)
        return std::make_unique<BoostSource>(hf, BoostSource::Kind::xz, path);
    if (got >= 3 && magic[0] == 'B' && magic[1] == 'Z' && magic[2] == 'h')
        return std::make_unique<BoostSource>(hf, BoostSource::Kind::bzip2, path);
    if (got >= 4 && std::memcmp(magic, zstd, 4) == 0) return std::make_unique<ZstdSource>(hf, path);
    compressed = got >= 2 && magic[0] == 0x1f && magic[1] == 0x8b;
    // bgzip: gzip with the extra field "BC" (SAM/BAM format specification, section 4.1); htslib
    // reads it (and seeks in it with its .gzi index).
    const bool bgzip =
        got >= 18 && compressed && magic[3] == 4 && magic[12] == 'B' && magic[13] == 'C';
    if (compressed && !bgzip) return std::make_unique<GzipSource>(hf, path);
    return std::make_unique<BgzfSource>(hf, path);
}

}  // namespace

}  // namespace tidemark::detail
