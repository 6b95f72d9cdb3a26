// Sequence reading: FASTA streams (plain, gzip, bgzip, xz, bzip2, zstd, stdin) and faidx regions,
// yielding one compactly stored contig at a time.
#pragma once

#include <algorithm>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "tidemark/intervals.hpp"

namespace tidemark {

/// Base codes used everywhere inside tidemark (A<C<G<T, as in profile context indices).
enum BaseCode : uint8_t { base_a = 0, base_c = 1, base_g = 2, base_t = 3, base_unknown = 4 };

/// How readers take lowercase (soft-masked) bases: as their base (A, C, G, T), or as unknown
/// bases (emission 1, context reset), as annotators often do with repeat-masked assemblies.
enum class SoftMasked : uint8_t { base, unknown };

/// Parses "base" or "unknown"; throws UsageError otherwise.
SoftMasked parse_soft_masked(const std::string& text);

/// A maximal run of unknown bases (N or another IUPAC ambiguity code), contig coordinates.
struct UnknownRun {
    int64_t begin = 0;
    int64_t length = 0;
};

struct Composition;

/// Runs of unknown bases at least this long are assembly gaps: calls never span one, posterior
/// tracks leave them out, and a domain on each side of one is its own call. 100 is the length
/// assemblies use for a gap of unknown size (NCBI AGP specification v2.0; from memory), so every
/// such gap counts, while short ambiguity runs inside sequence do not.
inline constexpr int64_t assembly_gap_min_length = 100;

/// One FASTA record, or one region of it, held at 2 bits per base plus a list of unknown runs.
///
/// Storage is chunked (4 Mi bases per chunk) so that growing a chromosome copies at most its
/// first chunk and peak memory stays at about 0.25 bytes per base. Reusing one Contig for many
/// records keeps its chunks allocated. Not copyable (a copy would share the chunks); see
/// shared_prefix for the one read-only copy there is.
struct Contig {
    Contig() = default;
    Contig(const Contig&) = delete;
    Contig& operator=(const Contig&) = delete;
    Contig(Contig&&) = default;
    Contig& operator=(Contig&&) = default;
    ~Contig() = default;

    std::string name;             ///< record name: first word of the FASTA header
    int64_t offset = 0;           ///< 0-based position of base 0 on the named sequence (regions)
    int64_t length = 0;           ///< number of bases, known and unknown
    int64_t sequence_length = 0;  ///< length of the whole named sequence when this contig is a
                                  ///< region of it (faidx); 0 for streamed records
    /// Length of the whole named sequence (for chrom-sizes files and track headers).
    int64_t full_length() const { return sequence_length > 0 ? sequence_length : offset + length; }
    int64_t soft_masked =
        0;  ///< lowercase bases seen (their base, or unknown with SoftMasked::unknown)
    std::vector<UnknownRun> unknown;  ///< sorted, disjoint, non-adjacent

    /// Code 0..4 of base i (0 <= i < length).
    uint8_t base(int64_t i) const;
    /// Writes the codes of bases [begin, begin+n) to out (0..4).
    void unpack(int64_t begin, int64_t n, uint8_t* out) const;
    /// Total number of unknown bases.
    int64_t unknown_count() const;
    /// Forgets the bases (keeps allocated chunks for reuse).
    void clear();
    /// Appends one base code (0..4).
    void push(uint8_t code);
    /// Appends n base codes (0..4); the bulk form of push used by the readers.
    void append(const uint8_t* codes, int64_t n);
    /// Appends n unknown bases (one run; no per-base work).
    void append_unknown(int64_t n);
    /// A read-only contig of the first n bases, sharing this one's storage, for reading on
    /// another thread while this one is still appended to (a long record's first segments are
    /// decoded before the rest is read). n is at most length rounded down to a multiple of 4:
    /// appending rewrites the byte of the last, partly filled group of 4 bases, never earlier
    /// ones, and frees no storage a prefix holds. clear() and reuse do write over it, so the
    /// prefix must be gone by then.
    Contig shared_prefix(int64_t n) const;

    static constexpr int chunk_shift = 22;  // bases per chunk = 4 Mi (1 MiB packed)

private:
    friend Composition composition(const Contig& contig, int64_t begin,
                                   int64_t end);  // reads chunks_
    /// Chunk `chunk` with room for at least `bytes` bytes (allocated or grown as needed).
    uint8_t* chunk_room(size_t chunk, int64_t bytes);
    std::vector<std::shared_ptr<uint8_t[]>> chunks_;  ///< shared with prefixes (shared_prefix)
    /// Bytes allocated for chunks_[0]: it starts small and doubles up to a whole chunk, so that
    /// a short record (a draft's contigs are often under 1 kbp) costs its bytes, not a chunk.
    int64_t first_chunk_bytes_ = 0;
};

/// Counts of bases and CpG dinucleotides over an interval.
struct Composition {
    int64_t a = 0, c = 0, g = 0, t = 0, unknown = 0;
    int64_t cpg = 0;  ///< positions i with C at i and G at i+1, both inside the interval

    int64_t known() const { return a + c + g + t; }
    /// Count by count (for compositions of adjacent intervals, add the CpG across the seam).
    Composition& operator+=(const Composition& o);
    Composition& operator-=(const Composition& o);
    /// (C+G)/(A+C+G+T); 0 when no base is known.
    double gc_fraction() const;
    /// Observed/expected CpG ratio N(CpG)*L/(N(C)*N(G)) with L = known bases
    /// (Gardiner-Garden & Frommer 1987, J. Mol. Biol. 196:261-282); NaN when N(C)*N(G) = 0.
    double cpg_obs_exp() const;
};

/// Composition of bases [begin, end) of a contig.
Composition composition(const Contig& contig, int64_t begin, int64_t end);

/// The parts that lie in [begin, end) of the contig's unknown runs of at least `min_length` bases
/// (judged by the whole run), in order, into `out` (pass assembly_gap_min_length for the
/// assembly gaps).
void unknown_runs_in(const Contig& contig, int64_t begin, int64_t end, int64_t min_length,
                     std::vector<std::pair<int64_t, int64_t>>& out);

/// A region to decode: 0-based half-open on the named sequence.
struct Region {
    std::string contig;
    int64_t begin = 0;
    int64_t end = 0;
};

/// A source of contigs, read one at a time.
class SequenceSource {
public:
    virtual ~SequenceSource() = default;
    /// Reads the next record into contig (reusing its storage); false at the end.
    /// Throws InputError naming file, record and line on malformed input.
    virtual bool next(Contig& contig) = 0;
    /// The path as the user gave it ("-" for stdin).
    virtual const std::string& path() const = 0;
    /// How lowercase bases of the records read from now on are taken [SoftMasked::base].
    virtual void set_soft_masked(SoftMasked mode) { soft_masked_ = mode; }
    SoftMasked soft_masked() const { return soft_masked_; }
    /// Has `hook` called with the record being read each time about `bases` more of its bases
    /// have been read (at the end of a line or of an input buffer), so that work on a long
    /// record's first bases can start before the rest is read. Streamed FASTA calls it; other
    /// sources never do. An exception from the hook leaves next() and ends the reading.
    void watch_growth(std::function<void(const Contig&)> hook, int64_t bases) {
        growth_hook_ = std::move(hook);
        growth_step_ = std::max<int64_t>(1, bases);
    }

protected:
    SoftMasked soft_masked_ = SoftMasked::base;
    std::function<void(const Contig&)> growth_hook_;
    int64_t growth_step_ = 0;
};

/// Replaces the bases of `contig` (its name is kept; offset, lengths and counts are reset) by a
/// sequence held in memory, read as the FASTA reader reads a record's lines: A, C, G, T in either
/// case, N and the IUPAC ambiguity codes as unknown bases, lowercase counted in soft_masked (and
/// unknown with SoftMasked::unknown); spaces, tabs and line ends are skipped. For programs and
/// bindings that hold sequences as text. Throws InputError naming the contig, the character and
/// its 1-based position in `text` for any other byte.
void contig_from_text(std::string_view text, Contig& contig, SoftMasked soft = SoftMasked::base);

/// Streams every record of a FASTA file. path "-" is stdin. Plain, gzip and bgzip are read
/// through htslib; xz, bzip2 and zstd (by their magic bytes) through Boost.Iostreams.
/// Record names must be unique within the file.
std::unique_ptr<SequenceSource> open_fasta(const std::string& path);

/// Where a record starts: the byte offset (uncompressed) of its header line, or of the line
/// ends before it, and that line's number (for messages).
struct RecordStart {
    int64_t offset = 0;
    int64_t line = 1;
};

/// Reads only the records that start at these offsets, in this order, parsing each as
/// open_fasta does (a shard's share, with offsets from the index). Plain or bgzip files with
/// their .fai/.gzi index only.
std::unique_ptr<SequenceSource> open_fasta_records(const std::string& path,
                                                   std::vector<RecordStart> starts);

/// Where a record's bases lie in its file, as its .fai line gives it: the offset of its first
/// base (uncompressed), bases per line and bytes per line.
struct RecordLayout {
    int64_t offset = 0;
    int64_t line_bases = 0, line_bytes = 0;
};

/// Parts of one record read into `contig`, which gets the record's whole length: bases outside
/// the windows are unknown and never read (a shard's segments of a record split between shards,
/// with a few bases of context). Each window is read by seeking to its first base (plain or
/// bgzip with .gzi) and parsing as the FASTA stream does. Lowercase bases are counted in
/// soft_masked only inside [count_begin, count_end) of each window, and read as `soft` says.
/// Windows are sorted and disjoint. Throws InputError naming the record and position of a byte
/// that is not a base.
struct RecordWindow {
    int64_t begin = 0, end = 0;
    int64_t count_begin = 0, count_end = 0;
};
void read_record_windows(const std::string& path, const std::string& name, int64_t length,
                         const RecordLayout& layout, const std::vector<RecordWindow>& windows,
                         Contig& contig, SoftMasked soft = SoftMasked::base);

/// Makes sure PATH.fai (and PATH.gzi for bgzip) exist and are at least as new as PATH: builds
/// them under temporary names and renames them into place, so that concurrent processes never
/// see half an index. False when the file cannot be indexed (plain gzip, xz, ...; not FASTA)
/// or the index cannot be written (a read-only folder).
bool ensure_fasta_index(const std::string& path);

/// Resolves region strings ("chr", "chr:beg-end", 1-based inclusive as in samtools, "," allowed
/// in numbers) and BED intervals against the faidx index of path (built when missing for plain
/// and bgzip files). Regions are returned in index order, then by start; overlapping regions are
/// an error. Throws InputError for unknown contigs, out-of-range or malformed regions, or a
/// plain-gzip file (which cannot be indexed: suggest bgzip).
std::vector<Region> resolve_regions(const std::string& path,
                                    const std::vector<std::string>& region_strings,
                                    const std::vector<Interval>& bed_regions);

/// Reads the given (resolved) regions of path through faidx, one contig per region.
std::unique_ptr<SequenceSource> open_regions(const std::string& path, std::vector<Region> regions);

}  // namespace tidemark
