// Byte sources: htslib BGZF for plain/gzip/bgzip, Boost.Iostreams for xz, bzip2 and zstd.
#include "byte_source.hpp"

#include <boost/iostreams/filter/bzip2.hpp>
#include <boost/iostreams/filter/lzma.hpp>
#include <boost/iostreams/filter/zstd.hpp>
#include <boost/iostreams/filtering_stream.hpp>
#include <cerrno>
#include <cstring>
#include <htslib/bgzf.h>
#include <htslib/hfile.h>
#include <sys/stat.h>

#include "tidemark/error.hpp"

namespace tidemark::detail {
namespace {

std::string display_name(const std::string& path) { return path == "-" ? "<stdin>" : path; }

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
            throw InputError(path_ + ": bgzip file has no end-of-file marker: it is probably "
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
    enum class Kind { xz, bzip2, zstd };
    BoostSource(hFILE* hf, Kind kind, std::string path) : hf_(hf), path_(std::move(path)) {
        switch (kind) {
            case Kind::xz: in_.push(boost::iostreams::lzma_decompressor()); break;
            case Kind::bzip2: in_.push(boost::iostreams::bzip2_decompressor()); break;
            case Kind::zstd: in_.push(boost::iostreams::zstd_decompressor()); break;
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

}  // namespace

std::unique_ptr<ByteSource> open_byte_source(const std::string& path) {
    if (path != "-") {
        struct stat st{};
        if (stat(path.c_str(), &st) != 0)
            throw InputError(path + ": cannot open: " + std::strerror(errno));
        if (S_ISDIR(st.st_mode)) throw InputError(path + ": is a directory, not a sequence file");
    }
    hFILE* hf = hopen(path.c_str(), "r");
    if (!hf) throw InputError(display_name(path) + ": cannot open: " + std::strerror(errno));
    unsigned char magic[6] = {0, 0, 0, 0, 0, 0};
    const ssize_t got = hpeek(hf, magic, sizeof magic);
    if (got < 0) {
        hclose_abruptly(hf);
        throw InputError(display_name(path) + ": cannot read");
    }
    static const unsigned char xz[6] = {0xFD, '7', 'z', 'X', 'Z', 0x00};
    static const unsigned char zstd[4] = {0x28, 0xB5, 0x2F, 0xFD};
    if (got >= 6 && std::memcmp(magic, xz, 6) == 0)
        return std::make_unique<BoostSource>(hf, BoostSource::Kind::xz, path);
    if (got >= 3 && magic[0] == 'B' && magic[1] == 'Z' && magic[2] == 'h')
        return std::make_unique<BoostSource>(hf, BoostSource::Kind::bzip2, path);
    if (got >= 4 && std::memcmp(magic, zstd, 4) == 0)
        return std::make_unique<BoostSource>(hf, BoostSource::Kind::zstd, path);
    return std::make_unique<BgzfSource>(hf, path);
}

}  // namespace tidemark::detail
