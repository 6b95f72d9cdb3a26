// Random access through faidx: resolving region strings and BED intervals, reading regions.
#include <fmt/format.h>
#include <htslib/bgzf.h>
#include <htslib/faidx.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstdlib>
#include <cstring>
#include <map>
#include <memory>
#include <mutex>

#include "base_table.hpp"
#include "tidemark/error.hpp"
#include "tidemark/log.hpp"
#include "tidemark/output.hpp"
#include "tidemark/sequence.hpp"
#include "tidemark/suggest.hpp"

namespace tidemark {
namespace {

struct FaiDeleter {
    void operator()(faidx_t* f) const { fai_destroy(f); }
};
using FaiPtr = std::unique_ptr<faidx_t, FaiDeleter>;

bool newer_or_same(const std::string& a, const std::string& b) {
    struct stat sa {
    }, sb{};
    if (stat(a.c_str(), &sa) != 0 || stat(b.c_str(), &sb) != 0) return false;
    return sa.st_mtim.tv_sec > sb.st_mtim.tv_sec ||
           (sa.st_mtim.tv_sec == sb.st_mtim.tv_sec && sa.st_mtim.tv_nsec >= sb.st_mtim.tv_nsec);
}

// 2 for bgzip, 0 for uncompressed text starting with '>' (both indexable), else -1.
int indexable(const std::string& path) {
    BGZF* fp = bgzf_open(path.c_str(), "r");
    if (!fp) return false;
    const int compression = bgzf_compression(fp);
    char first = 0;
    const bool read = bgzf_read(fp, &first, 1) == 1;
    bgzf_close(fp);
    return compression == 2 ? 2 : compression == 0 && read && first == '>' ? 0 : -1;
}

// Builds PATH.fai (and PATH.gzi for bgzip) under temporary names and renames them into place.
bool build_index(const std::string& path) {
    try {
        StagedPath fai(path + ".fai");
        StagedPath gzi(path + ".gzi");
        if (fai_build3(path.c_str(), fai.temp().c_str(), gzi.temp().c_str()) != 0) return false;
        struct stat st {};
        if (stat(gzi.temp().c_str(), &st) == 0 && st.st_size > 0) gzi.commit();
        fai.commit();
        return true;
    } catch (const IoError&) {
        return false;  // a read-only folder: fall back to reading the records
    }
}

// The index of a FASTA whose folder cannot be written (and whose own .fai is missing or older
// than it): built once per process in a temporary folder, removed at exit.
struct TemporaryIndex {
    std::string folder, fai, gzi;
    ~TemporaryIndex() {
        std::remove(fai.c_str());
        std::remove(gzi.c_str());
        rmdir(folder.c_str());
    }
};

const TemporaryIndex* temporary_index(const std::string& path) {
    static std::mutex mutex;
    static std::map<std::string, std::unique_ptr<TemporaryIndex>> built;
    const std::lock_guard<std::mutex> lock(mutex);
    auto& slot = built[path];
    if (slot) return slot.get();
    const char* tmp = std::getenv("TMPDIR");
    std::string folder = std::string(tmp && *tmp ? tmp : "/tmp") + "/tidemark-index-XXXXXX";
    if (!mkdtemp(folder.data())) return nullptr;
    auto index = std::make_unique<TemporaryIndex>();
    index->folder = folder;
    index->fai = folder + "/index.fai";
    index->gzi = folder + "/index.gzi";
    if (fai_build3(path.c_str(), index->fai.c_str(), index->gzi.c_str()) != 0) return nullptr;
    Logger().warn(fmt::format(
        "{}: cannot write its index beside it ({}.fai; a read-only folder?), so it is "
        "indexed in a temporary folder for this run only; index it once where it can be "
        "written to save that time",
        path, path));
    slot = std::move(index);
    return slot.get();
}

FaiPtr load_index(const std::string& path) {
    if (path == "-")
        throw InputError("--region needs a file: standard input cannot be read by region");
    struct stat st {};
    if (stat(path.c_str(), &st) != 0)
        throw InputError(path + ": cannot open: " + std::strerror(errno));
    if (S_ISDIR(st.st_mode)) throw InputError(path + ": is a directory, not a sequence file");
    BGZF* fp = bgzf_open(path.c_str(), "r");
    if (!fp) throw InputError(path + ": cannot open: " + std::strerror(errno));
    const int compression = bgzf_compression(fp);
    bgzf_close(fp);
    if (compression == 1)
        throw InputError(path +
                         ": is plain gzip, which cannot be read by region; recompress it with "
                         "'zcat " +
                         path +
                         " | bgzip > NEW.fa.gz' (bgzip is in Debian's tabix "
                         "package) or drop --region to stream the whole file");
    // Built here under temporary names first, so that concurrent runs (shards) never read a
    // half-written index; FAI_CREATE remains for a read-only folder, where nothing is written.
    faidx_t* fai = nullptr;
    if (ensure_fasta_index(path)) {
        fai = fai_load3(path.c_str(), nullptr, nullptr, 0);
    } else if (indexable(path) >= 0) {  // FASTA, but its folder cannot take the index
        if (const TemporaryIndex* t = temporary_index(path)) {
            struct stat gz {};
            const bool has_gzi = stat(t->gzi.c_str(), &gz) == 0 && gz.st_size > 0;
            fai = fai_load3(path.c_str(), t->fai.c_str(), has_gzi ? t->gzi.c_str() : nullptr, 0);
        }
    }
    if (!fai)
        throw InputError(path +
                         ": cannot load or build the faidx index (.fai); is the file FASTA "
                         "with equal line lengths within each record, and is its folder "
                         "writable?");
    return FaiPtr(fai);
}

int64_t parse_position(const std::string& text, const std::string& region) {
    std::string digits;
    for (char ch : text)
        if (ch != ',') digits.push_back(ch);
    if (digits.empty() || digits.size() > 15 ||
        !std::all_of(digits.begin(), digits.end(), [](char c) { return c >= '0' && c <= '9'; }))
        throw InputError(fmt::format(
            "region '{}': '{}' is not a position (expected NAME, NAME:BEG or NAME:BEG-END, "
            "1-based inclusive)",
            region, text));
    return std::strtoll(digits.c_str(), nullptr, 10);
}

// "no sequence named 'X' in FILE; closest names: a, b, c (of N)".
std::string no_such_sequence(const faidx_t* fai, const std::string& path, const std::string& name) {
    std::vector<std::string> names;
    for (int i = 0; i < faidx_nseq(fai); ++i) names.emplace_back(faidx_iseq(fai, i));
    const std::vector<std::string> closest = closest_names(name, names, 3, false);
    std::string list;
    for (const auto& n : closest) list += (list.empty() ? "" : ", ") + n;
    return fmt::format("no sequence named '{}' in {}{}", name, path,
                       closest.empty() ? std::string(" (it has no sequences)")
                                       : fmt::format("; closest names: {} (of {} sequence{})", list,
                                                     names.size(), names.size() == 1 ? "" : "s"));
}

Region parse_region(const faidx_t* fai, const std::string& path, const std::string& text) {
    if (text.empty()) throw InputError("empty region string");
    Region r;
    if (faidx_has_seq(fai, text.c_str())) {
        r.contig = text;
        r.begin = 0;
        r.end = faidx_seq_len(fai, text.c_str());
        return r;
    }
    const size_t colon = text.rfind(':');
    if (colon == std::string::npos)
        throw InputError(fmt::format("region '{}': {}", text, no_such_sequence(fai, path, text)));
    r.contig = text.substr(0, colon);
    if (!faidx_has_seq(fai, r.contig.c_str()))
        throw InputError(
            fmt::format("region '{}': {}", text, no_such_sequence(fai, path, r.contig)));
    const int64_t length = faidx_seq_len(fai, r.contig.c_str());
    const std::string range = text.substr(colon + 1);
    const size_t dash = range.find('-');
    const int64_t first = parse_position(range.substr(0, dash), text);
    int64_t last = length;
    if (dash != std::string::npos && dash + 1 < range.size())
        last = parse_position(range.substr(dash + 1), text);
    // Positions in these messages are the region string's: 1-based, inclusive.
    if (first < 1)
        throw InputError(fmt::format(
            "region '{}': start must be at least 1 (region strings are 1-based, inclusive)", text));
    if (first > length)
        throw InputError(fmt::format(
            "region '{}': start {} is past the end of '{}', which has {} bp (region strings "
            "are 1-based, inclusive)",
            text, first, r.contig, length));
    if (last < first)
        throw InputError(fmt::format(
            "region '{}': end {} is before start {} (region strings are 1-based, inclusive)", text,
            last, first));
    if (last > length)
        throw InputError(fmt::format(
            "region '{}': end {} is past the end of '{}', which has {} bp (region strings "
            "are 1-based, inclusive)",
            text, last, r.contig, length));
    r.begin = first - 1;
    r.end = last;
    return r;
}

// Appends bases [from, to) of sequence `name` to contig, fetched in bounded pieces (memory
// stays flat on chromosomes); lowercase bases are counted when count_soft.
void append_fetched(faidx_t* fai, const std::string& path, const std::string& name, int64_t from,
                    int64_t to, bool count_soft, SoftMasked soft, Contig& contig,
                    std::vector<uint8_t>& codes) {
    const auto& table = detail::sequence_codes(soft);
    constexpr int64_t piece = 1 << 20;
    for (int64_t pos = from; pos < to; pos += piece) {
        const int64_t last = std::min(to, pos + piece) - 1;
        hts_pos_t got = 0;
        char* seq = faidx_fetch_seq64(fai, name.c_str(), pos, last, &got);
        if (!seq || got != last - pos + 1) {
            std::free(seq);
            throw InputError(
                fmt::format("{}: cannot read {}:{}-{} (1-based, inclusive) through the index", path,
                            name, pos + 1, last + 1));
        }
        codes.resize(static_cast<size_t>(got));
        for (hts_pos_t k = 0; k < got; ++k) {
            const unsigned char ch = static_cast<unsigned char>(seq[k]);
            const uint8_t v = table[ch];
            if (v & detail::not_a_base) {
                std::free(seq);
                throw InputError(
                    fmt::format("{}: record '{}': illegal character {} at position {} (1-based)",
                                path, name, detail::describe_byte(ch), pos + k + 1));
            }
            codes[k] = v & 7;
            if (count_soft) contig.soft_masked += v >> 3;  // lowercase_flag
        }
        std::free(seq);
        contig.append(codes.data(), got);
    }
}

class FaidxSource final : public SequenceSource {
public:
    FaidxSource(std::string path, std::vector<Region> regions)
        : path_(std::move(path)), fai_(load_index(path_)), regions_(std::move(regions)) {}

    const std::string& path() const override { return path_; }

    bool next(Contig& contig) override {
        if (next_ == regions_.size()) return false;
        const Region& r = regions_[next_++];
        contig.clear();
        contig.name = r.contig;
        contig.offset = r.begin;
        contig.sequence_length = faidx_seq_len(fai_.get(), r.contig.c_str());
        append_fetched(fai_.get(), path_, r.contig, r.begin, r.end, true, soft_masked_, contig,
                       codes_);
        return true;
    }

private:
    std::string path_;
    FaiPtr fai_;
    std::vector<Region> regions_;
    std::vector<uint8_t> codes_;  ///< one fetched piece as base codes
    size_t next_ = 0;
};

}  // namespace

bool ensure_fasta_index(const std::string& path) {
    const int kind = indexable(path);
    if (kind < 0) return false;
    if (newer_or_same(path + ".fai", path) && (kind == 0 || newer_or_same(path + ".gzi", path)))
        return true;
    return build_index(path);
}

std::vector<Region> resolve_regions(const std::string& path,
                                    const std::vector<std::string>& region_strings,
                                    const std::vector<Interval>& bed_regions) {
    FaiPtr fai = load_index(path);
    std::vector<Region> regions;
    for (const auto& s : region_strings) regions.push_back(parse_region(fai.get(), path, s));
    for (const auto& iv : bed_regions) {
        if (!faidx_has_seq(fai.get(), iv.chrom.c_str()))
            throw InputError(
                fmt::format("regions BED: {}", no_such_sequence(fai.get(), path, iv.chrom)));
        const int64_t length = faidx_seq_len(fai.get(), iv.chrom.c_str());
        if (iv.end > length)
            throw InputError(fmt::format(
                "regions BED: interval '{} {} {}' (0-based, half-open) ends past the end of "
                "'{}', which has {} bp",
                iv.chrom, iv.begin, iv.end, iv.chrom, length));
        if (iv.end > iv.begin) regions.push_back({iv.chrom, iv.begin, iv.end});
    }
    std::vector<int> rank(regions.size());
    for (size_t i = 0; i < regions.size(); ++i) {
        for (int t = 0; t < faidx_nseq(fai.get()); ++t)
            if (regions[i].contig == faidx_iseq(fai.get(), t)) rank[i] = t;
    }
    std::vector<size_t> order(regions.size());
    for (size_t i = 0; i < order.size(); ++i) order[i] = i;
    std::stable_sort(order.begin(), order.end(), [&](size_t a, size_t b) {
        if (rank[a] != rank[b]) return rank[a] < rank[b];
        return regions[a].begin < regions[b].begin;
    });
    std::vector<Region> sorted;
    for (size_t i : order) {
        const Region& r = regions[i];
        if (!sorted.empty() && sorted.back().contig == r.contig && r.begin < sorted.back().end)
            throw InputError(
                fmt::format("regions {}:{}-{} and {}:{}-{} (1-based, inclusive) overlap; give "
                            "disjoint regions (decoding "
                            "each region separately would report the overlap twice)",
                            sorted.back().contig, sorted.back().begin + 1, sorted.back().end,
                            r.contig, r.begin + 1, r.end));
        sorted.push_back(r);
    }
    return sorted;
}

std::unique_ptr<SequenceSource> open_regions(const std::string& path, std::vector<Region> regions) {
    return std::make_unique<FaidxSource>(path, std::move(regions));
}

}  // namespace tidemark
