// Compact contig storage (2-bit chunks plus unknown runs) and base composition.
#include "tidemark/sequence.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace tidemark {

namespace {
constexpr int64_t chunk_bases = int64_t{1} << Contig::chunk_shift;
constexpr int64_t chunk_bytes = chunk_bases / 4;
}  // namespace

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
    for (int64_t k = 0; k < n;) {
        const int64_t i = begin + k;
        const uint8_t* chunk = chunks_[i >> chunk_shift].get();
        const int64_t in_chunk = std::min(n - k, chunk_bases - (i & (chunk_bases - 1)));
        for (int64_t j = 0; j < in_chunk; ++j) {
            const int64_t p = (i + j) & (chunk_bases - 1);
            out[k + j] = (chunk[p >> 2] >> ((p & 3) * 2)) & 3;
        }
        k += in_chunk;
    }
    auto it = std::upper_bound(unknown.begin(), unknown.end(), begin,
                               [](int64_t pos, const UnknownRun& r) { return pos < r.begin; });
    if (it != unknown.begin()) --it;
    for (; it != unknown.end() && it->begin < begin + n; ++it) {
        const int64_t lo = std::max(it->begin, begin);
        const int64_t hi = std::min(it->begin + it->length, begin + n);
        for (int64_t p = lo; p < hi; ++p) out[p - begin] = base_unknown;
    }
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
    soft_masked = 0;
    unknown.clear();
}

void Contig::push(uint8_t code) {
    const int64_t i = length;
    const size_t chunk = static_cast<size_t>(i >> chunk_shift);
    if (chunk == chunks_.size()) chunks_.push_back(std::make_unique<uint8_t[]>(chunk_bytes));
    uint8_t& byte = chunks_[chunk][(i & (chunk_bases - 1)) >> 2];
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

double Composition::gc_fraction() const {
    const int64_t n = known();
    return n == 0 ? 0.0 : static_cast<double>(c + g) / static_cast<double>(n);
}

double Composition::cpg_obs_exp() const {
    if (c == 0 || g == 0) return std::numeric_limits<double>::quiet_NaN();
    return static_cast<double>(cpg) * static_cast<double>(known()) /
           (static_cast<double>(c) * static_cast<double>(g));
}

Composition composition(const Contig& contig, int64_t begin, int64_t end) {
    Composition comp;
    constexpr int64_t step = 1 << 16;
    uint8_t buf[step];
    uint8_t prev = base_unknown;
    for (int64_t pos = begin; pos < end; pos += step) {
        const int64_t n = std::min(step, end - pos);
        contig.unpack(pos, n, buf);
        for (int64_t k = 0; k < n; ++k) {
            const uint8_t b = buf[k];
            switch (b) {
                case base_a: ++comp.a; break;
                case base_c: ++comp.c; break;
                case base_g: ++comp.g; comp.cpg += (prev == base_c); break;
                case base_t: ++comp.t; break;
                default: ++comp.unknown; break;
            }
            prev = b;
        }
    }
    return comp;
}

}  // namespace tidemark
