// Compact contig storage (2-bit chunks plus unknown runs) and base composition.
#include <sys/mman.h>

#include <algorithm>
#include <array>
#include <cmath>
#include <cstring>
#include <limits>

#include "tidemark/error.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {

namespace {
constexpr int64_t chunk_bases = int64_t{1} << Contig::chunk_shift;
constexpr int64_t chunk_bytes = chunk_bases / 4;
static_assert(chunk_bytes % 8 == 0, "composition() reads chunks as whole 64-bit words");

// A new full-size chunk, its pages mapped in one call. Not zeroed: bytes are written before they
// are read, as in chunks reused with old bases. Faulting its 256 pages in one by one as append
// wrote them (and before that, zeroing them) took a third of reading chrX, all on the reading
// thread while the pool waited for the record.
std::unique_ptr<uint8_t[]> new_chunk() {
    auto chunk = std::make_unique_for_overwrite<uint8_t[]>(chunk_bytes);
#ifdef MADV_POPULATE_WRITE
    const auto page = static_cast<uintptr_t>(4096);
    const auto begin = reinterpret_cast<uintptr_t>(chunk.get()) & ~(page - 1);
    const auto end = reinterpret_cast<uintptr_t>(chunk.get()) + chunk_bytes;
    // Advice only: an older kernel refuses it and the pages fault in as they are written.
    (void)madvise(reinterpret_cast<void*>(begin), end - begin, MADV_POPULATE_WRITE);
#endif
    return chunk;
}

// Unpacking a byte through a table (4 codes at once) instead of shifting per base: the decoder
// unpacks every base twice per run.
using Four = std::array<uint8_t, 4>;
const std::array<Four, 256>& expand_table() {
    static const std::array<Four, 256> table = [] {
        std::array<Four, 256> t{};
        for (int b = 0; b < 256; ++b)
            for (int j = 0; j < 4; ++j) t[b][j] = static_cast<uint8_t>((b >> (2 * j)) & 3);
        return t;
    }();
    return table;
}

// Little-endian assembly whatever the host order (compiles to one load on x86).
inline uint64_t load_word(const uint8_t* p) {
    uint64_t w = 0;
    for (int j = 7; j >= 0; --j) w = (w << 8) | p[j];
    return w;
}

// Population count by bit slicing: the builtin is a library call without -mpopcnt.
inline int64_t ones(uint64_t x) {
    x = x - ((x >> 1) & 0x5555555555555555ull);
    x = (x & 0x3333333333333333ull) + ((x >> 2) & 0x3333333333333333ull);
    x = (x + (x >> 4)) & 0x0F0F0F0F0F0F0F0Full;
    return static_cast<int64_t>((x * 0x0101010101010101ull) >> 56);
}

// First unknown run that ends after pos.
std::vector<UnknownRun>::const_iterator first_run_after(const std::vector<UnknownRun>& runs,
                                                        int64_t pos) {
    auto it = std::upper_bound(runs.begin(), runs.end(), pos,
                               [](int64_t p, const UnknownRun& r) { return p < r.begin; });
    if (it != runs.begin() && std::prev(it)->begin + std::prev(it)->length > pos) --it;
    return it;
}
}  // namespace

SoftMasked parse_soft_masked(const std::string& text) {
    if (text == "base") return SoftMasked::base;
    if (text == "unknown") return SoftMasked::unknown;
    throw UsageError("--soft-masked must be base or unknown, not '" + text + "'");
}

uint8_t Contig::base(int64_t i) const {
    auto it = std::upper_bound(unknown.begin(), unknown.end(), i,
                               [](int64_t pos, const UnknownRun& r) { return pos < r.begin; });
    if (it != unknown.begin()) {
        const UnknownRun& r = *std::prev(it);
        if (i < r.begin + r.length) return base_unknown;
    }
    const uint8_t byte = chunks_[i >> chunk_shift][(i & (chunk_bases - 1)) >> 2];
    return (byte >> ((i & 3) * 2)) & 3;
}

void Contig::unpack(int64_t begin, int64_t n, uint8_t* out) const {
    const auto& expand = expand_table();
    for (int64_t k = 0; k < n;) {
        const int64_t i = begin + k;
        const uint8_t* chunk = chunks_[i >> chunk_shift].get();
        const int64_t in_chunk = std::min(n - k, chunk_bases - (i & (chunk_bases - 1)));
        int64_t p = i & (chunk_bases - 1);
        const int64_t stop = p + in_chunk;
        uint8_t* o = out + k;
        for (; p < stop && (p & 3); ++p) *o++ = (chunk[p >> 2] >> ((p & 3) * 2)) & 3;
        for (; p + 4 <= stop; p += 4, o += 4) {
            const Four& f = expand[chunk[p >> 2]];
            o[0] = f[0];
            o[1] = f[1];
            o[2] = f[2];
            o[3] = f[3];
        }
        for (; p < stop; ++p) *o++ = (chunk[p >> 2] >> ((p & 3) * 2)) & 3;
        k += in_chunk;
    }
    const int64_t end = begin + n;
    for (auto it = first_run_after(unknown, begin); it != unknown.end() && it->begin < end; ++it) {
        const int64_t lo = std::max(it->begin, begin);
        const int64_t hi = std::min(it->begin + it->length, begin + n);
        std::fill(out + (lo - begin), out + (hi - begin), uint8_t{base_unknown});
    }
}

void unknown_runs_in(const Contig& contig, int64_t begin, int64_t end, int64_t min_length,
                     std::vector<std::pair<int64_t, int64_t>>& out) {
    out.clear();
    for (auto it = first_run_after(contig.unknown, begin);
         it != contig.unknown.end() && it->begin < end; ++it)
        if (it->length >= min_length)
            out.emplace_back(std::max(begin, it->begin), std::min(end, it->begin + it->length));
}

int64_t Contig::unknown_count() const {
    int64_t total = 0;
    for (const auto& r : unknown) total += r.length;
    return total;
}

void Contig::clear() {
    name.clear();
    offset = 0;
    length = 0;
    sequence_length = 0;
    soft_masked = 0;
    unknown.clear();
}

uint8_t* Contig::chunk_room(size_t chunk, int64_t bytes) {
    if (chunk == 0) {
        const int64_t have = chunks_.empty() ? 0 : first_chunk_bytes_;
        if (have < bytes) {
            int64_t room = std::max<int64_t>(2 * have, 256);
            while (room < bytes) room *= 2;
            room = std::min(room, chunk_bytes);
            // A new array, not a resize: a prefix sharing the old one keeps it (shared_prefix).
            std::shared_ptr<uint8_t[]> grown =
                std::make_unique<uint8_t[]>(static_cast<size_t>(room));
            if (have > 0) std::memcpy(grown.get(), chunks_[0].get(), static_cast<size_t>(have));
            if (chunks_.empty())
                chunks_.push_back(std::move(grown));
            else
                chunks_[0] = std::move(grown);
            first_chunk_bytes_ = room;
        }
    } else if (chunk == chunks_.size()) {
        chunks_.push_back(new_chunk());
    }
    return chunks_[chunk].get();
}

Contig Contig::shared_prefix(int64_t n) const {
    if (n < 0 || n > (length & ~int64_t{3}))
        throw InternalError("Contig::shared_prefix: not a prefix of whole bytes");
    Contig prefix;
    prefix.name = name;
    prefix.offset = offset;
    prefix.length = n;
    prefix.sequence_length = sequence_length;
    prefix.chunks_.assign(
        chunks_.begin(),
        chunks_.begin() + static_cast<std::ptrdiff_t>((n + chunk_bases - 1) >> chunk_shift));
    prefix.first_chunk_bytes_ = first_chunk_bytes_;
    for (const UnknownRun& r : unknown) {  // the run at the end may still grow: clip it
        if (r.begin >= n) break;
        prefix.unknown.push_back({r.begin, std::min(r.length, n - r.begin)});
    }
    return prefix;
}

void Contig::push(uint8_t code) {
    const int64_t i = length;
    const size_t chunk = static_cast<size_t>(i >> chunk_shift);
    const int64_t at = (i & (chunk_bases - 1)) >> 2;
    uint8_t& byte = chunk_room(chunk, at + 1)[at];
    const int shift = (i & 3) * 2;
    byte = static_cast<uint8_t>(byte & ~(3u << shift));  // chunks are reused: clear old bits
    if (code == base_unknown) {
        if (!unknown.empty() && unknown.back().begin + unknown.back().length == i)
            ++unknown.back().length;
        else
            unknown.push_back({i, 1});
    } else {
        byte = static_cast<uint8_t>(byte | (code << shift));
    }
    ++length;
}

void Contig::append(const uint8_t* codes, int64_t n) {
    int64_t k = 0;
    while (k < n && (length & 3)) push(codes[k++]);
    while (n - k >= 4) {
        const int64_t i = length;
        const size_t chunk = static_cast<size_t>(i >> chunk_shift);
        const int64_t room = chunk_bases - (i & (chunk_bases - 1));
        const int64_t groups = std::min(n - k, room) / 4;
        const int64_t at = (i & (chunk_bases - 1)) >> 2;
        uint8_t* dst = chunk_room(chunk, at + groups) + at;
        // Whole bytes are overwritten, so reused chunks need no clearing; unknown (4) packs as 0.
        const auto pack_four = [&](int64_t g, int64_t c) {  // group g from codes[c, c + 4)
            const uint8_t c0 = codes[c], c1 = codes[c + 1], c2 = codes[c + 2], c3 = codes[c + 3];
            dst[g] = static_cast<uint8_t>((c0 & 3) | (c1 & 3) << 2 | (c2 & 3) << 4 | (c3 & 3) << 6);
            if ((c0 | c1 | c2 | c3) & base_unknown) {
                for (int j = 0; j < 4; ++j) {
                    if (codes[c + j] != base_unknown) continue;
                    const int64_t pos = length + 4 * g + j;
                    if (!unknown.empty() && unknown.back().begin + unknown.back().length == pos)
                        ++unknown.back().length;
                    else
                        unknown.push_back({pos, 1});
                }
            }
        };
        // Eight codes at a time as one 64-bit word when none is unknown: the 2-bit fields are
        // gathered by shifts (codes c0..c7 in bytes 0..7 become the bytes c0|c1<<2|c2<<4|c3<<6
        // and c4|...|c7<<6) instead of one group of four per iteration.
        int64_t g = 0;
        for (; g + 2 <= groups; g += 2, k += 8) {
            uint64_t w;
            std::memcpy(&w, codes + k, 8);
            if (w & 0x0404040404040404u) {
                pack_four(g, k);
                pack_four(g + 1, k + 4);
                continue;
            }
            w &= 0x0303030303030303u;
            w = (w | w >> 6) & 0x000F000F000F000Fu;
            w = (w | w >> 12) & 0x000000FF000000FFu;
            dst[g] = static_cast<uint8_t>(w);
            dst[g + 1] = static_cast<uint8_t>(w >> 32);
        }
        for (; g < groups; ++g, k += 4) pack_four(g, k);
        length += 4 * groups;
    }
    while (k < n) push(codes[k++]);
}

void Contig::append_unknown(int64_t n) {
    while (n > 0 && (length & 3)) {
        push(base_unknown);
        --n;
    }
    const int64_t bulk = n & ~int64_t{3};
    if (bulk > 0) {
        const int64_t begin = length;
        for (int64_t done = 0; done < bulk;) {  // unknown packs as 0: clear whole bytes
            const size_t chunk = static_cast<size_t>(length >> chunk_shift);
            const int64_t room = chunk_bases - (length & (chunk_bases - 1));
            const int64_t take = std::min(bulk - done, room);
            const int64_t at = (length & (chunk_bases - 1)) >> 2;
            std::memset(chunk_room(chunk, at + take / 4) + at, 0, static_cast<size_t>(take / 4));
            length += take;
            done += take;
        }
        if (!unknown.empty() && unknown.back().begin + unknown.back().length == begin)
            unknown.back().length += bulk;
        else
            unknown.push_back({begin, bulk});
    }
    for (int64_t k = bulk; k < n; ++k) push(base_unknown);
}

Composition& Composition::operator+=(const Composition& o) {
    a += o.a;
    c += o.c;
    g += o.g;
    t += o.t;
    unknown += o.unknown;
    cpg += o.cpg;
    return *this;
}

Composition& Composition::operator-=(const Composition& o) {
    a -= o.a;
    c -= o.c;
    g -= o.g;
    t -= o.t;
    unknown -= o.unknown;
    cpg -= o.cpg;
    return *this;
}

double Composition::gc_fraction() const {
    const int64_t n = known();
    return n == 0 ? 0.0 : static_cast<double>(c + g) / static_cast<double>(n);
}

double Composition::cpg_obs_exp() const {
    if (c == 0 || g == 0) return std::numeric_limits<double>::quiet_NaN();
    return static_cast<double>(cpg) * static_cast<double>(known()) /
           (static_cast<double>(c) * static_cast<double>(g));
}

// Counts 32 bases per 64-bit word of the packed storage with bit masks and popcounts, treating
// every stored base as known, then moves the unknown bases (stored as A) out of the A count.
// An unknown base never forms a CpG because it is stored as A.
Composition composition(const Contig& contig, int64_t begin, int64_t end) {
    Composition comp;
    if (end <= begin) return comp;
    constexpr uint64_t low = 0x5555555555555555ull;  // bit 0 of every base
    uint64_t carry_c = 0;  // 1 when the base just before the current word is C (inside the range)
    // Bases 4b..4b+3 live in byte b of a chunk, base (i & 3) at bit 2*(i & 3); a chunk holds a
    // whole number of words, so no word straddles two chunks.
    for (int64_t pos = begin & ~int64_t{31}; pos < end; pos += 32) {
        const uint8_t* chunk = contig.chunks_[pos >> Contig::chunk_shift].get();
        const uint64_t x = load_word(chunk + ((pos & (chunk_bases - 1)) >> 2));
        const int64_t lo = std::max<int64_t>(begin - pos, 0), hi = std::min<int64_t>(end - pos, 32);
        uint64_t m = low;
        if (hi < 32) m &= (uint64_t{1} << (2 * hi)) - 1;
        if (lo > 0) m &= ~((uint64_t{1} << (2 * lo)) - 1);
        const uint64_t b0 = x & low, b1 = (x >> 1) & low;
        const uint64_t a = ~b1 & ~b0 & m, c = ~b1 & b0 & m, g = b1 & ~b0 & m, t = b1 & b0 & m;
        comp.a += ones(a);
        comp.c += ones(c);
        comp.g += ones(g);
        comp.t += ones(t);
        comp.cpg += ones((c << 2) & g) + static_cast<int64_t>(carry_c & g & 1);
        carry_c = c >> 62;
    }
    const auto& runs = contig.unknown;
    for (auto it = first_run_after(runs, begin); it != runs.end() && it->begin < end; ++it) {
        const int64_t n = std::min(it->begin + it->length, end) - std::max(it->begin, begin);
        comp.a -= n;
        comp.unknown += n;
    }
    return comp;
}

}  // namespace tidemark
