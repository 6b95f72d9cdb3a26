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
#include <unordered_map>

#include "base_table.hpp"
#include "fai_index.hpp"
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
// Returns "" or why the file cannot be indexed; throws IoError when the folder cannot take them.
std::string build_index_beside(const std::string& path) {
    StagedPath fai(path + ".fai");
    StagedPath gzi(path + ".gzi");
    const std::string why = detail::build_fai(path, fai.temp(), gzi.temp());
    if (!why.empty()) return why;
    struct stat st {};
    if (stat(gzi.temp().c_str(), &st) == 0 && st.st_size > 0) gzi.commit();
    fai.commit();
    return "";
}

bool index_is_current(const std::string& path, int kind) {
    return newer_or_same(path + ".fai", path) && (kind == 0 || newer_or_same(path + ".gzi", path));
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

// Null when no temporary folder can be made; throws InputError when the file cannot be indexed.
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
    const std::string why = detail::build_fai(path, index->fai, index->gzi);
    if (!why.empty())
        throw InputError(fmt::format("{}: cannot be indexed for reading by region: {}", path, why));
    Logger().warn(fmt::format(
        "{}: cannot write its index beside it ({}.fai; a read-only folder?), so it is "
        "indexed in a temporary folder for this run only; index it once where it can be "
        "written to save that time",
        path, path));
    slot = std::move(index);
    return slot.get();
}

// An open faidx index with the record lengths read from its .fai: htslib 1.16's faidx_seq_len
// returns an int, which wraps past 2^31 bases (its fetches are 64-bit).
struct FastaIndex {
    FaiPtr fai;
    std::vector<std::string> names;                                       ///< in index order
    std::unordered_map<std::string, std::pair<size_t, int64_t>> records;  ///< rank, length

    bool has(const std::string& name) const { return records.count(name) != 0; }
    int64_t length(const std::string& name) const { return records.at(name).second; }
    size_t rank(const std::string& name) const { return records.at(name).first; }
};

FastaIndex load_index(const std::string& path) {
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
    const int kind = indexable(path);
    if (kind < 0)
        throw InputError(path +
                         ": cannot be read by region: it is neither FASTA text (starting with "
                         "'>') nor bgzip-compressed FASTA; drop --region to stream it");
    // Built under temporary names first, so that concurrent runs (shards) never read a
    // half-written index; a read-only folder gets an index in a temporary folder instead.
    std::string fai_path = path + ".fai", gzi_path = path + ".gzi";
    if (!index_is_current(path, kind)) {
        std::string why;
        bool beside = false;
        try {
            why = build_index_beside(path);
            beside = why.empty();
        } catch (const IoError&) {
        }
        if (!why.empty())
            throw InputError(
                fmt::format("{}: cannot be indexed for reading by region: {}", path, why));
        if (!beside) {
            const TemporaryIndex* t = temporary_index(path);
            if (!t)
                throw InputError(path +
                                 ": cannot write its faidx index (.fai) beside it or in a "
                                 "temporary folder");
            fai_path = t->fai;
            gzi_path = t->gzi;
        }
    }
    struct stat gz {};
    const bool has_gzi = stat(gzi_path.c_str(), &gz) == 0 && gz.st_size > 0;
    FastaIndex index;
    index.fai.reset(
        fai_load3(path.c_str(), fai_path.c_str(), has_gzi ? gzi_path.c_str() : nullptr, 0));
    if (!index.fai)
        throw InputError(
            fmt::format("{}: cannot load its faidx index {}; delete it and rerun", path, fai_path));
    for (detail::FaiEntry& e : detail::read_fai(fai_path)) {
        index.records.emplace(e.name, std::make_pair(index.names.size(), e.length));
        index.names.push_back(std::move(e.name));
    }
    return index;
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

// "no sequence named 'X' in FILE; closest names: a, b, c (of N)", or, for a record that faidx
// leaves out of its index because it has no bases, says so.
std::string no_such_sequence(const FastaIndex& index, const std::string& path,
                             const std::string& name) {
    if (detail::has_record_named(path, name))
        return fmt::format(
            "record '{}' of {} is empty (0 bases), so there is nothing in it to decode; leave it "
            "out of the regions",
            name, path);
    const std::vector<std::string> closest = closest_names(name, index.names, 3, false);
    std::string list;
    for (const auto& n : closest) list += (list.empty() ? "" : ", ") + n;
    return fmt::format("no sequence named '{}' in {}{}", name, path,
                       closest.empty()
                           ? std::string(" (it has no sequences)")
                           : fmt::format("; closest names: {} (of {} sequence{})", list,
                                         index.names.size(), index.names.size() == 1 ? "" : "s"));
}

Region parse_region(const FastaIndex& index, const std::string& path, const std::string& text) {
    if (text.empty()) throw InputError("empty region string");
    Region r;
    if (index.has(text)) {
        r.contig = text;
        r.begin = 0;
        r.end = index.length(text);
        return r;
    }
    const size_t colon = text.rfind(':');
    if (colon == std::string::npos)
        throw InputError(fmt::format("region '{}': {}", text, no_such_sequence(index, path, text)));
    r.contig = text.substr(0, colon);
    if (!index.has(r.contig))
        throw InputError(
            fmt::format("region '{}': {}", text, no_such_sequence(index, path, r.contig)));
    const int64_t length = index.length(r.contig);
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
        : path_(std::move(path)), index_(load_index(path_)), regions_(std::move(regions)) {}

    const std::string& path() const override { return path_; }

    bool next(Contig& contig) override {
        if (next_ == regions_.size()) return false;
        const Region& r = regions_[next_++];
        contig.clear();
        contig.name = r.contig;
        contig.offset = r.begin;
        contig.sequence_length = index_.length(r.contig);
        append_fetched(index_.fai.get(), path_, r.contig, r.begin, r.end, true, soft_masked_,
                       contig, codes_);
        return true;
    }

private:
    std::string path_;
    FastaIndex index_;
    std::vector<Region> regions_;
    std::vector<uint8_t> codes_;  ///< one fetched piece as base codes
    size_t next_ = 0;
};

}  // namespace

bool ensure_fasta_index(const std::string& path) {
    const int kind = indexable(path);
    if (kind < 0) return false;
    if (index_is_current(path, kind)) return true;
    try {
        return build_index_beside(path).empty();
    } catch (const IoError&) {
        return false;  // a read-only folder: fall back to reading the records
    }
}

std::vector<Region> resolve_regions(const std::string& path,
                                    const std::vector<std::string>& region_strings,
                                    const std::vector<Interval>& bed_regions) {
    const FastaIndex index = load_index(path);
    std::vector<Region> regions;
    for (const auto& s : region_strings) regions.push_back(parse_region(index, path, s));
    for (const auto& iv : bed_regions) {
        if (!index.has(iv.chrom))
            throw InputError(
                fmt::format("regions BED: {}", no_such_sequence(index, path, iv.chrom)));
        const int64_t length = index.length(iv.chrom);
        if (iv.end > length)
            throw InputError(fmt::format(
                "regions BED: interval '{} {} {}' (0-based, half-open) ends past the end of "
                "'{}', which has {} bp",
                iv.chrom, iv.begin, iv.end, iv.chrom, length));
        if (iv.end > iv.begin) regions.push_back({iv.chrom, iv.begin, iv.end});
    }
    std::vector<size_t> order(regions.size());
    for (size_t i = 0; i < order.size(); ++i) order[i] = i;
    std::stable_sort(order.begin(), order.end(), [&](size_t a, size_t b) {
        const size_t ra = index.rank(regions[a].contig), rb = index.rank(regions[b].contig);
        if (ra != rb) return ra < rb;
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
