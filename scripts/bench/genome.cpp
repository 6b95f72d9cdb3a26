// Seeded synthetic genome for the benchmark: CpG-depleted background with occasional CpG islands.
//
// Everything random comes from our own xoshiro256** stream (no std distributions, whose output
// differs between standard libraries), so a seed gives the same FASTA with any compiler; only
// std::log in the geometric draws could differ in its last bit on another C library. The
// composition parameters are independent of tidemark's cpg-island profile on purpose: the benchmark
// must not decode data drawn from the very model it decodes with.
#include <algorithm>
#include <cerrno>
#include <cinttypes>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <vector>

namespace {

// xoshiro256** seeded through splitmix64: Blackman D, Vigna S (2021) "Scrambled linear
// pseudorandom number generators", ACM Trans. Math. Softw. 47(4):36. The shifts, rotations and
// multipliers are those of the authors' reference code, written from memory.
struct Rng {
    uint64_t s[4];
    explicit Rng(uint64_t seed) {
        for (auto& w : s) {
            seed += 0x9E3779B97F4A7C15ull;
            uint64_t z = seed;
            z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
            z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
            w = z ^ (z >> 31);
        }
    }
    static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
    uint64_t next() {
        const uint64_t result = rotl(s[1] * 5, 7) * 9;
        const uint64_t t = s[1] << 17;
        s[2] ^= s[0];
        s[3] ^= s[1];
        s[1] ^= s[2];
        s[0] ^= s[3];
        s[2] ^= t;
        s[3] = rotl(s[3], 45);
        return result;
    }
    // Uniform in [0, 1) with 53 random bits.
    double uniform() { return static_cast<double>(next() >> 11) * 0x1p-53; }
    // Uniform integer in [lo, hi] (the modulo bias is below 2^-40 for the spans used here).
    int64_t between(int64_t lo, int64_t hi) {
        return lo + static_cast<int64_t>(next() % static_cast<uint64_t>(hi - lo + 1));
    }
    // Geometric number of trials with the given mean (inverse transform of our uniform).
    int64_t geometric(double mean) {
        const double u = 1.0 - uniform();  // (0, 1]
        return 1 + static_cast<int64_t>(std::floor(std::log(u) / std::log1p(-1.0 / mean)));
    }
};

// One sequence class: base frequencies and how often a G right after a C is kept.
struct Composition {
    double gc;        // P(C or G)
    double cpg_keep;  // a G drawn after a C is kept with this probability, else redrawn
};

// Bulk human DNA: GC about 41 % and CpG at about a fifth of its expected frequency (IHGSC 2001,
// "Initial sequencing and analysis of the human genome", Nature 409:860-921; both from memory).
// Redrawing 88 % of the G's drawn after a C gives GC ~0.39 and CpG o/e ~0.23 (measured on
// 1 Mbp, seed 7), close to those figures.
constexpr Composition background{0.41, 0.12};
// Islands: G+C > 50 % with CpG near its expected frequency (Gardiner-Garden M, Frommer M 1987,
// "CpG islands in vertebrate genomes", J. Mol. Biol. 196:261-282); 0.65 is our choice.
constexpr Composition island{0.65, 1.0};

struct Options {
    int64_t length = 10'000'000;  // bases per contig
    int contigs = 1;
    uint64_t seed = 1;
    double island_spacing = 100'000;  // mean bases between islands: ~28,900 islands in ~2.9 Gbp
                                      // (IHGSC 2001, from memory)
    int64_t island_min = 300, island_max = 3000;  // uniform, mean 1.65 kb (our choice)
    double gap_spacing = 5'000'000;  // mean bases between runs of N, "assembly gaps" (our choice)
    int64_t gap_min = 100, gap_max = 50'000;  // uniform gap length (our choice)
    double soft_mask_fraction = 0.3;          // lowercase share (repeat-masked style; our choice)
    std::string output = "-";
    std::string truth;  // optional BED of the islands
};

[[noreturn]] void usage(const char* msg) {
    std::fprintf(stderr,
                 "genome: %s\n"
                 "usage: genome [--length N] [--contigs K] [--seed S] [--truth BED] [-o FASTA]\n"
                 "              [--island-spacing N] [--gap-spacing N] [--gap-max N]\n"
                 "Writes K contigs of N bases each (60-column FASTA) from a seeded generator;\n"
                 "--truth writes the islands as BED. Spacings are mean bases between events.\n",
                 msg);
    std::exit(2);
}

int64_t parse_int(const char* s, const char* what) {
    char* end = nullptr;
    errno = 0;
    const double v = std::strtod(s, &end);  // accepts 1e6 as well as 1000000
    if (errno || end == s || *end || v < 0 || v != std::floor(v))
        usage((std::string("bad value for ") + what + ": " + s).c_str());
    return static_cast<int64_t>(v);
}

class Writer {
public:
    explicit Writer(FILE* f) : f_(f) { line_.reserve(61); }
    void header(const std::string& name) {
        flush_line();
        std::fprintf(f_, ">%s synthetic\n", name.c_str());
    }
    void put(char c) {
        line_.push_back(c);
        if (line_.size() == 60) flush_line();
    }
    void flush_line() {
        if (line_.empty()) return;
        line_.push_back('\n');
        if (std::fwrite(line_.data(), 1, line_.size(), f_) != line_.size()) {
            std::fprintf(stderr, "genome: write failed: %s\n", std::strerror(errno));
            std::exit(1);
        }
        line_.clear();
    }

private:
    FILE* f_;
    std::string line_;
};

char draw_base(Rng& rng, const Composition& c, char prev) {
    for (;;) {
        const double u = rng.uniform();
        const double half_gc = c.gc / 2, half_at = (1 - c.gc) / 2;
        const char b = u < half_at             ? 'A'
                       : u < half_at + half_gc ? 'C'
                       : u < half_at + c.gc    ? 'G'
                                               : 'T';
        if (b == 'G' && prev == 'C' && rng.uniform() >= c.cpg_keep) continue;
        return b;
    }
}

}  // namespace

int main(int argc, char** argv) {
    Options o;
    for (int i = 1; i < argc; ++i) {
        const std::string a = argv[i];
        const auto value = [&]() -> const char* {
            if (i + 1 >= argc) usage(("missing value after " + a).c_str());
            return argv[++i];
        };
        if (a == "--length")
            o.length = parse_int(value(), "--length");
        else if (a == "--contigs")
            o.contigs = static_cast<int>(parse_int(value(), "--contigs"));
        else if (a == "--seed")
            o.seed = static_cast<uint64_t>(parse_int(value(), "--seed"));
        else if (a == "--truth")
            o.truth = value();
        else if (a == "--island-spacing")
            o.island_spacing = static_cast<double>(parse_int(value(), a.c_str()));
        else if (a == "--gap-spacing")
            o.gap_spacing = static_cast<double>(parse_int(value(), a.c_str()));
        else if (a == "--gap-max")
            o.gap_max = parse_int(value(), a.c_str());
        else if (a == "-o" || a == "--output")
            o.output = value();
        else
            usage(("unknown argument " + a).c_str());
    }
    if (o.length < 1 || o.contigs < 1) usage("--length and --contigs must be >= 1");
    if (o.island_spacing < 2 || o.gap_spacing < 2) usage("spacings must be >= 2");
    if (o.gap_max < o.gap_min) usage("--gap-max must be >= 100");
    FILE* out = o.output == "-" ? stdout : std::fopen(o.output.c_str(), "wb");
    if (!out) usage(("cannot create " + o.output + ": " + std::strerror(errno)).c_str());
    FILE* truth = nullptr;
    if (!o.truth.empty() && !(truth = std::fopen(o.truth.c_str(), "w")))
        usage(("cannot create " + o.truth + ": " + std::strerror(errno)).c_str());
    std::setvbuf(out, nullptr, _IOFBF, 1 << 20);

    Rng rng(o.seed);
    Writer w(out);
    for (int k = 0; k < o.contigs; ++k) {
        const std::string name = "synth" + std::to_string(k + 1);
        w.header(name);
        int64_t pos = 0;
        int64_t next_island = rng.geometric(o.island_spacing);
        int64_t next_gap = rng.geometric(o.gap_spacing);
        int64_t mask_left = 0, unmask_left = rng.geometric(3000);
        char prev = 'N';
        while (pos < o.length) {
            if (pos >= next_gap) {
                const int64_t n = std::min(rng.between(o.gap_min, o.gap_max), o.length - pos);
                for (int64_t i = 0; i < n; ++i) w.put('N');
                pos += n;
                prev = 'N';
                next_gap = pos + rng.geometric(o.gap_spacing);
                continue;
            }
            const bool in_island = pos >= next_island;
            int64_t n = 1;
            const Composition* comp = &background;
            if (in_island) {
                n = std::min(rng.between(o.island_min, o.island_max), o.length - pos);
                comp = &island;
                if (truth)
                    std::fprintf(truth, "%s\t%" PRId64 "\t%" PRId64 "\n", name.c_str(), pos,
                                 pos + n);
                next_island = pos + n + rng.geometric(o.island_spacing);
            }
            for (int64_t i = 0; i < n; ++i) {
                char b = draw_base(rng, *comp, prev);
                prev = b;
                // Alternate masked and unmasked stretches with geometric lengths, islands never
                // masked (they are rarely repeats).
                if (mask_left > 0) {
                    --mask_left;
                    if (!in_island) b = static_cast<char>(b - 'A' + 'a');
                    if (mask_left == 0)
                        unmask_left =
                            rng.geometric(3000 * (1 - o.soft_mask_fraction) / o.soft_mask_fraction);
                } else if (--unmask_left <= 0) {
                    mask_left = rng.geometric(3000);
                }
                w.put(b);
            }
            pos += n;
        }
        w.flush_line();
    }
    if (std::fflush(out) != 0 || (out != stdout && std::fclose(out) != 0)) {
        std::fprintf(stderr, "genome: write failed on %s: %s\n", o.output.c_str(),
                     std::strerror(errno));
        return 1;
    }
    if (truth && std::fclose(truth) != 0) {
        std::fprintf(stderr, "genome: write failed on %s\n", o.truth.c_str());
        return 1;
    }
    return 0;
}
