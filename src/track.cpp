// BED and GFF3 lines for calls; bedGraph and bigWig posterior tracks.
#include "tidemark/track.hpp"

#include <fmt/format.h>
#if defined(__x86_64__)
#include <immintrin.h>
#endif

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <iterator>
#include <string_view>

#include "decode_internal.hpp"
#include "tidemark/error.hpp"

namespace tidemark {
namespace {

std::string format_oe(const Composition& comp) {
    const double oe = comp.cpg_obs_exp();
    return std::isnan(oe) ? std::string("NA") : fmt::format("{:.4f}", oe);
}

long call_score(const Call& call) {
    return std::lround(std::clamp(call.mean_posterior, 0.0, 1.0) * 1000.0);
}

// GFF3 (Sequence Ontology GFF3 specification 1.26): percent-encode characters with a meaning in
// the column or attribute syntax, and controls.
std::string gff3_escape(const std::string& text, bool seqid) {
    std::string out;
    for (unsigned char ch : text) {
        const bool reserved = ch < 0x20 || ch == 0x7F || ch == '%' || ch == '\t' || ch == ';' ||
                              ch == '=' || ch == '&' || ch == ',' ||
                              (seqid && (ch == ' ' || ch == '>'));
        if (reserved)
            out += fmt::format("%{:02X}", ch);
        else
            out += static_cast<char>(ch);
    }
    return out;
}

// One bedGraph line for a run of value q / 10^digits (q in 0..10^digits). The integer is written
// as its digits with the point placed `digits` from the right: the text `{:.{digits}f}` gives for
// the double q / 10^digits (that double is the one nearest a decimal of at most 13 significant
// digits, so printing it correctly rounded to `digits` decimals gives q back), without a
// floating-point conversion or a format string.
void append_bedgraph_line(std::string& out, std::string_view name, int64_t begin, int64_t end,
                          int64_t q, int digits) {
    const auto append_integer = [&](int64_t v) {
        const fmt::format_int text(v);  // digits in a buffer of its own: no locale, no allocation
        out.append(text.data(), text.size());
    };
    int64_t unit = 1;
    for (int d = 0; d < digits; ++d) unit *= 10;
    out.append(name);
    out += '\t';
    append_integer(begin);
    out += '\t';
    append_integer(end);
    out += '\t';
    append_integer(q / unit);
    if (digits > 0) {
        out += '.';
        const size_t at = out.size();
        out.append(static_cast<size_t>(digits), '0');
        for (int64_t fraction = q % unit, d = digits - 1; fraction > 0; fraction /= 10, --d)
            out[at + static_cast<size_t>(d)] = static_cast<char>('0' + fraction % 10);
    }
    out += '\n';
}

// std::llround of x for 0 <= x < 2^52 without the library call (x minus its integer part is
// exact there; halves go up, as llround's do): the per-base rounding of every track value.
int64_t round_half_up(double x) {
    if (!(x >= 0 && x < 4503599627370496.0)) return std::llround(x);
    const auto whole = static_cast<int64_t>(x);
    return x - static_cast<double>(whole) >= 0.5 ? whole + 1 : whole;
}

// round_half_up(clamp(p, 0, 1) * scale) for p = row[i * stride] (a region of one state), as a
// double, or -1 where the product is outside [0, 2^52) (NaN too), which the caller works out with
// round_half_up itself. Only double operations without a branch, which the compiler turns into
// vector code: r = (x + 2^52) - 2^52 is x rounded to an integer (exact for 0 <= x < 2^52), one
// less when above x is x's integer part, and the rest is round_half_up's own arithmetic.
void quantise_state(const double* row, int64_t stride, int64_t n, double scale, double* out) {
    constexpr double two52 = 4503599627370496.0;
    for (int64_t i = 0; i < n; ++i) {
        const double p = 0.0 + row[i * stride];  // the region's sum, started at 0 as elsewhere
        const double x = (p < 0.0 ? 0.0 : 1.0 < p ? 1.0 : p) * scale;  // std::clamp(p, 0, 1)
        const double nearest = (x + two52) - two52;
        const double whole = nearest > x ? nearest - 1.0 : nearest;
        const double q = x - whole >= 0.5 ? whole + 1.0 : whole;
        out[i] = x >= 0.0 && x < two52 ? q : -1.0;
    }
}

#if TIDEMARK_AVX2_KERNELS
// quantise_state four bases at a time, with the same operations in each lane.
[[gnu::noinline, gnu::target("avx2")]] void quantise_state_avx2(const double* row, int64_t stride,
                                                                int64_t n, double scale,
                                                                double* out) {
    const __m256d zero = _mm256_setzero_pd(), one = _mm256_set1_pd(1.0);
    const __m256d half = _mm256_set1_pd(0.5), minus_one = _mm256_set1_pd(-1.0);
    const __m256d two52 = _mm256_set1_pd(4503599627370496.0), times = _mm256_set1_pd(scale);
    int64_t i = 0;
    for (; i + 4 <= n; i += 4) {
        const double* r = row + i * stride;
        const __m256d p =
            _mm256_add_pd(zero, _mm256_set_pd(r[3 * stride], r[2 * stride], r[stride], r[0]));
        __m256d c = _mm256_blendv_pd(p, one, _mm256_cmp_pd(one, p, _CMP_LT_OQ));
        c = _mm256_blendv_pd(c, zero, _mm256_cmp_pd(p, zero, _CMP_LT_OQ));
        const __m256d x = _mm256_mul_pd(c, times);
        const __m256d nearest = _mm256_sub_pd(_mm256_add_pd(x, two52), two52);
        const __m256d whole = _mm256_blendv_pd(nearest, _mm256_sub_pd(nearest, one),
                                               _mm256_cmp_pd(nearest, x, _CMP_GT_OQ));
        const __m256d q =
            _mm256_blendv_pd(whole, _mm256_add_pd(whole, one),
                             _mm256_cmp_pd(_mm256_sub_pd(x, whole), half, _CMP_GE_OQ));
        const __m256d in_range =
            _mm256_and_pd(_mm256_cmp_pd(x, zero, _CMP_GE_OQ), _mm256_cmp_pd(x, two52, _CMP_LT_OQ));
        _mm256_storeu_pd(out + i, _mm256_blendv_pd(minus_one, q, in_range));
    }
    quantise_state(row + i * stride, stride, n - i, scale, out + i);
}
#endif

void quantise_state_dispatch(const double* row, int64_t stride, int64_t n, double scale,
                             double* out) {
#if TIDEMARK_AVX2_KERNELS
    if (detail::use_avx2_kernels()) return quantise_state_avx2(row, stride, n, scale, out);
#endif
    quantise_state(row, stride, n, scale, out);
}

}  // namespace

std::string region_color(const Model& model, int region) {
    // tidemark's palette: distinguishable on white and dark browser backgrounds.
    static const char* palette[] = {"0,110,120", "200,110,0", "110,50,160", "40,140,70",
                                    "190,30,80", "90,90,90",  "20,80,190",  "150,120,0"};
    const auto r = static_cast<size_t>(region);
    if (r < model.region_colors.size() && !model.region_colors[r].empty())
        return model.region_colors[r];
    return palette[r % std::size(palette)];
}

std::string format_bed_header(BedStyle style, const Model& model, const std::string& command_line) {
    std::string out;
    if (style == BedStyle::browser)
        out += fmt::format(
            "track name=\"tidemark {0}\" description=\"tidemark calls, profile {0}\" "
            "itemRgb=\"On\"\n",
            model.name);
    out += fmt::format("#tidemark {} calls, profile {}\n", TIDEMARK_VERSION, model.name);
    out += "#command: " + command_line + "\n#";
    for (size_t i = 0; i < std::size(bed_columns); ++i) {
        if (i > 0) out += '\t';
        out += bed_columns[i].name;
        if (i + 1 == bed_standard_columns && style == BedStyle::browser)
            out += "\tthickStart\tthickEnd\titemRgb";
    }
    out += '\n';
    return out;
}

std::string format_bed_line(BedStyle style, const Model& model, const Contig& contig,
                            const Call& call) {
    const int64_t off = contig.offset;
    std::string browser;
    if (style == BedStyle::browser)
        browser = fmt::format("\t{}\t{}\t{}", off + call.core_begin, off + call.core_end,
                              region_color(model, call.region));
    return fmt::format("{}\t{}\t{}\t{}\t{}\t.{}\t{:.4f}\t{:.4f}\t{:.4f}\t{}\n", contig.name,
                       off + call.begin, off + call.end, model.region_names[call.region],
                       call_score(call), browser, call.mean_posterior, call.confident_fraction(),
                       call.composition.gc_fraction(), format_oe(call.composition));
}

std::string format_gff3_header() {
    return "##gff-version 3\n";
}

std::string format_gff3_sequence_region(const Contig& contig) {
    // GFF3 needs start <= end in ##sequence-region, which an empty record (1 0) breaks.
    if (contig.full_length() == 0) return "";
    return fmt::format("##sequence-region {} 1 {}\n", gff3_escape(contig.name, true),
                       contig.full_length());
}

std::string format_gff3_feature(const Model& model, const Contig& contig, const Call& call,
                                int64_t serial) {
    const std::string& region = model.region_names[call.region];
    const bool island = region == "cpg_island";
    const double oe = call.composition.cpg_obs_exp();
    std::string attributes = fmt::format(
        "ID={0}_{1};Name={0};Ontology_term={2};mean_posterior={3:.4f};confident_fraction={4:.4f};"
        "gc_fraction={5:.4f}",
        gff3_escape(region, false), serial, island ? "SO:0000307" : "SO:0000001",
        call.mean_posterior, call.confident_fraction(), call.composition.gc_fraction());
    if (!std::isnan(oe)) attributes += fmt::format(";cpg_obs_exp={:.4f}", oe);
    if (!std::isnan(call.signature_distance))
        attributes += fmt::format(";signature_distance={:.4f}", call.signature_distance);
    if (call.core_end > call.core_begin)
        attributes += fmt::format(";core_start={};core_end={}", contig.offset + call.core_begin + 1,
                                  contig.offset + call.core_end);
    return fmt::format("{}\ttidemark\t{}\t{}\t{}\t{:.4f}\t.\t.\t{}\n",
                       gff3_escape(contig.name, true), island ? "CpG_island" : "region",
                       contig.offset + call.begin + 1, contig.offset + call.end,
                       call.mean_posterior, attributes);
}

namespace {

// A fork's output bytes, in order: in memory up to spill_at, then in an unnamed temporary file
// (a long contig's per-base track can be gigabytes).
class Spool {
public:
    static constexpr size_t spill_at = size_t{8} << 20;
    Spool() = default;
    Spool(const Spool&) = delete;
    Spool& operator=(const Spool&) = delete;
    ~Spool() {
        if (file_) std::fclose(file_);
    }
    void append(std::string_view bytes) {
        memory_.append(bytes);
        if (memory_.size() >= spill_at) spill();
    }
    /// Calls f on the bytes in order, in pieces whose sizes are multiples of unit.
    template <class F>
    void replay(size_t unit, F&& f) {
        if (!file_) {
            if (!memory_.empty()) f(std::string_view(memory_));
            return;
        }
        spill();
        std::rewind(file_);
        std::string chunk(((size_t{1} << 20) / unit) * unit, '\0');
        size_t got = 0;
        while ((got = std::fread(chunk.data(), 1, chunk.size(), file_)) > 0)
            f(std::string_view(chunk.data(), got));
        if (std::ferror(file_)) throw IoError("cannot read back a temporary track spool file");
    }

private:
    void spill() {
        if (!file_ && !(file_ = std::tmpfile()))
            throw IoError(
                "cannot create a temporary file for posterior tracks (is TMPDIR writable?)");
        if (!memory_.empty() &&
            std::fwrite(memory_.data(), 1, memory_.size(), file_) != memory_.size())
            throw IoError("cannot write a temporary track spool file (disk full?)");
        memory_.clear();
    }
    std::string memory_;
    std::FILE* file_ = nullptr;
};

// One bigWig interval as a fork keeps it; sequence indexes the fork's own sequence list.
struct SpooledInterval {
    int64_t sequence, start, end;
    double value;
};

}  // namespace

struct PosteriorTracks::Track {
    int region = 0;
    std::vector<int> states;  ///< the states of region, ascending: the order of the sum
    std::unique_ptr<OutputFile> file;
    std::unique_ptr<BigWigWriter> bigwig;
    std::unique_ptr<Spool> spool;  ///< a fork's output
    std::string path;
    std::string buffer;
    int64_t run_begin = 0, run_end = 0;
    int64_t run_value = -1;  ///< quantised value of the open run, -1 = none
    double bin_sum = 0;      ///< posterior sum of the open bin (its bases outside long gaps)
    int64_t bin_begin = 0, bin_fill = 0;
    int64_t bin_known = 0;  ///< bases of the open bin outside long gaps
    bool holding = false;   ///< the next flushed run is the span's first: keep it back
    bool held = false;      ///< held_* is the span's first run, not yet written
    int64_t held_begin = 0, held_end = 0, held_value = -1;
};

PosteriorTracks::PosteriorTracks(const Model& model, TrackOptions options)
    : PosteriorTracks(model, std::move(options), false) {}

PosteriorTracks::PosteriorTracks(const Model& model, TrackOptions options, bool forked)
    : model_(model),
      options_(std::move(options)),
      scale_(std::pow(10.0, options_.digits)),
      forked_(forked) {
    if (options_.digits < 0 || options_.digits > 12)
        throw UsageError("--posterior-digits must be from 0 to 12");
    if (options_.bin < 1) throw UsageError("--bin must be at least 1");
    for (size_t r = 0; r < model.region_names.size(); ++r) {
        if (!model.region_report[r]) continue;
        auto t = std::make_unique<Track>();
        t->region = static_cast<int>(r);
        for (size_t st = 0; st < model.region_of_state.size(); ++st)
            if (model.region_of_state[st] == t->region) t->states.push_back(static_cast<int>(st));
        const std::string base = options_.prefix + "." + model.region_names[r];
        t->path = base + (options_.format == TrackFormat::bigwig ? ".bw"
                          : options_.bgzip                       ? ".bedgraph.gz"
                                                                 : ".bedgraph");
        if (forked_) {
            t->spool = std::make_unique<Spool>();
        } else if (options_.format == TrackFormat::bigwig) {
            t->bigwig = std::make_unique<BigWigWriter>(t->path, options_.threads);
        } else {
            OutputFormat format;
            format.bgzip = options_.bgzip;
            format.tabix = options_.bgzip;
            format.skip_lines = options_.track_line ? 1 : 0;
            format.threads = options_.threads;
            t->file = std::make_unique<OutputFile>(t->path, format);
            if (options_.track_line)
                t->buffer = fmt::format(
                    "track type=bedGraph name=\"tidemark {0}\" description=\"P({0}), "
                    "profile {1}\" visibility=full viewLimits=0:1 autoScale=off\n",
                    model.region_names[r], model.name);
        }
        tracks_.push_back(std::move(t));
    }
}

PosteriorTracks::~PosteriorTracks() = default;

std::vector<std::string> PosteriorTracks::paths() const {
    std::vector<std::string> out;
    for (const auto& t : tracks_) out.push_back(t->path);
    return out;
}

std::unique_ptr<DecodeSink> PosteriorTracks::fork() const {
    return std::unique_ptr<DecodeSink>(new PosteriorTracks(model_, options_, true));
}

// Writes theirs' output (spool, then buffer) after mine's, wherever mine's goes. `sequence`
// replaces their bigWig sequence indexes (a segment of my contig), or -1 to map their own
// sequence list (a whole contig).
void PosteriorTracks::append_output(Track& mine, Track& theirs, const PosteriorTracks& other,
                                    int64_t sequence) {
    if (mine.spool)
        mine.spool->append(mine.buffer);
    else if (mine.file)
        mine.file->write(mine.buffer);
    mine.buffer.clear();
    theirs.spool->append(theirs.buffer);
    theirs.buffer.clear();
    if (options_.format != TrackFormat::bigwig) {
        theirs.spool->replay(1, [&](std::string_view bytes) {
            if (mine.spool)
                mine.spool->append(bytes);
            else
                mine.file->write(bytes);
        });
        return;
    }
    std::vector<int64_t> index;
    if (sequence < 0)
        for (const auto& s : other.sequences_)
            index.push_back(mine.bigwig ? mine.bigwig->add_sequence(s.name, s.length)
                                        : static_cast<int64_t>(sequences_.size() + index.size()));
    theirs.spool->replay(sizeof(SpooledInterval), [&](std::string_view bytes) {
        const size_t n = bytes.size() / sizeof(SpooledInterval);
        for (size_t i = 0; i < n; ++i) {
            SpooledInterval r;
            std::memcpy(&r, bytes.data() + i * sizeof r, sizeof r);
            r.sequence = sequence >= 0 ? sequence : index[static_cast<size_t>(r.sequence)];
            if (mine.bigwig)
                mine.bigwig->add(static_cast<int>(r.sequence), r.start, r.end, r.value);
            else
                mine.spool->append(std::string_view(reinterpret_cast<const char*>(&r), sizeof r));
        }
    });
}

void PosteriorTracks::join(DecodeSink& later) {
    auto* other = dynamic_cast<PosteriorTracks*>(&later);
    if (!other || !other->forked_ || other->tracks_.size() != tracks_.size())
        throw InternalError("PosteriorTracks::join: not a fork of these tracks");
    const bool whole = other->ended_ || !begun_ || ended_;  // a later contig, else a segment
    for (size_t k = 0; k < tracks_.size(); ++k) {
        Track& mine = *tracks_[k];
        Track& theirs = *other->tracks_[k];
        if (whole) {
            append_output(mine, theirs, *other, -1);
            continue;
        }
        if (mine.bin_fill != 0)
            throw InternalError("PosteriorTracks::join: a segment starts inside a bin");
        // Continues my open run when equal and adjacent, else closes it and opens this one.
        const auto continue_with = [&](int64_t value, int64_t begin, int64_t end) {
            if (mine.run_value == value && mine.run_end == begin) {
                mine.run_end = end;
                return;
            }
            flush_run(mine);
            mine.run_value = value;
            mine.run_begin = begin;
            mine.run_end = end;
        };
        if (theirs.holding) {  // they wrote nothing: at most one run, still open
            if (theirs.run_value >= 0)
                continue_with(theirs.run_value, theirs.run_begin, theirs.run_end);
        } else {
            if (theirs.held) continue_with(theirs.held_value, theirs.held_begin, theirs.held_end);
            flush_run(mine);  // their written runs and open run differ from the one before
            append_output(mine, theirs, *other, sequence_);
            mine.run_value = theirs.run_value;
            mine.run_begin = theirs.run_begin;
            mine.run_end = theirs.run_end;
        }
        mine.bin_sum = theirs.bin_sum;
        mine.bin_begin = theirs.bin_begin;
        mine.bin_fill = theirs.bin_fill;
        mine.bin_known = theirs.bin_known;
    }
    if (whole) {
        if (forked_)
            for (const auto& s : other->sequences_) sequences_.push_back(s);
        begun_ = other->begun_;
        ended_ = other->ended_;
    }
}

void PosteriorTracks::begin_contig(const Contig& contig) {
    contig_ = &contig;
    begun_ = true;
    ended_ = false;
    started_ = false;
    if (forked_ && options_.format == TrackFormat::bigwig) {
        sequences_.push_back({contig.name, contig.full_length()});
        sequence_ = static_cast<int>(sequences_.size() - 1);
    }
    for (auto& t : tracks_) {
        t->run_value = -1;
        t->bin_fill = 0;
        t->bin_known = 0;
        t->bin_sum = 0;
        if (t->bigwig) sequence_ = t->bigwig->add_sequence(contig.name, contig.full_length());
    }
}

void PosteriorTracks::flush_run(Track& t) {
    if (t.run_value < 0) return;
    if (t.holding) {  // a later segment's first run: the join decides where it goes
        t.holding = false;
        t.held = true;
        t.held_begin = t.run_begin;
        t.held_end = t.run_end;
        t.held_value = t.run_value;
        t.run_value = -1;
        return;
    }
    const double value = static_cast<double>(t.run_value) / scale_;
    const int64_t begin = contig_->offset + t.run_begin, end = contig_->offset + t.run_end;
    if (t.bigwig) {
        t.bigwig->add(sequence_, begin, end, value);
    } else if (forked_ && options_.format == TrackFormat::bigwig) {
        const SpooledInterval r{sequence_, begin, end, value};
        t.buffer.append(reinterpret_cast<const char*>(&r), sizeof r);
    } else {
        append_bedgraph_line(t.buffer, contig_->name, begin, end, t.run_value, options_.digits);
    }
    if (t.buffer.size() > (1 << 20)) {
        if (t.spool)
            t.spool->append(t.buffer);
        else
            t.file->write(t.buffer);
        t.buffer.clear();
    }
    t.run_value = -1;
}

void PosteriorTracks::add_value(Track& t, int64_t begin, int64_t end, double p) {
    const int64_t q = round_half_up(std::clamp(p, 0.0, 1.0) * scale_);
    if (q == t.run_value) {
        t.run_end = end;
        return;
    }
    flush_run(t);
    t.run_value = q;
    t.run_begin = begin;
    t.run_end = end;
}

// Closes the open bin at `end`: its mean over the bases outside long gaps, or no data.
void PosteriorTracks::end_bin(Track& t, int64_t end) {
    if (t.bin_known > 0)
        add_value(t, t.bin_begin, end, t.bin_sum / static_cast<double>(t.bin_known));
    else
        flush_run(t);
    t.bin_fill = 0;
    t.bin_known = 0;
    t.bin_sum = 0;
}

// P(region) at one base: its states' posteriors summed in ascending state order from 0, the
// order every track and the Python arrays use, so that all print the same values.
double PosteriorTracks::region_posterior(const Track& t, const double* row) {
    double p = 0;
    for (const int s : t.states) p += row[s];
    return p;
}

// One value per base (no bins): add_value for every base outside long gaps, flush_run at each
// gap, with the same sums and roundings. The values of a stretch are worked out first, each on
// its own (no branch on the open run between them, so the processor overlaps their roundings),
// and the runs are then found by comparing integers: this was a tenth to a fifth of a run's CPU
// time with tracks when it was done base by base.
void PosteriorTracks::per_base_values(Track& t, const BlockView& view) {
    constexpr int64_t chunk = 1024;
    double quantised[chunk];  // integers below 2^52 as doubles; -1: work it out with round_half_up
    const int S = view.states;
    const auto value_of = [&](const double* row) {
        return round_half_up(std::clamp(region_posterior(t, row), 0.0, 1.0) * scale_);
    };
    const auto known_stretch = [&](int64_t from, int64_t to) {  // no gap in [from, to)
        for (int64_t at = from; at < to; at += chunk) {
            const int64_t n = std::min(chunk, to - at);
            const double* rows = view.posterior + at * S;
            if (t.states.size() == 1) {
                quantise_state_dispatch(rows + t.states[0], S, n, scale_, quantised);
            } else {
                for (int64_t i = 0; i < n; ++i) {
                    const int64_t q = value_of(rows + i * S);
                    quantised[i] = q >= 0 && q < (int64_t{1} << 52) ? static_cast<double>(q) : -1.0;
                }
            }
            for (int64_t i = 0; i < n;) {
                const double v = quantised[i];
                const int64_t q = v >= 0 ? static_cast<int64_t>(v) : value_of(rows + i * S);
                const int64_t pos = view.begin + at + i;
                if (q != t.run_value) {
                    flush_run(t);
                    t.run_value = q;
                    t.run_begin = pos;
                }
                ++i;
                if (v >= 0)
                    while (i < n && quantised[i] == v) ++i;
                t.run_end = view.begin + at + i;
            }
        }
    };
    size_t gap = 0;
    for (int64_t i = 0; i < view.size;) {
        const int64_t pos = view.begin + i;
        while (gap < gaps_.size() && gaps_[gap].second <= pos) ++gap;
        if (gap < gaps_.size() && gaps_[gap].first <= pos) {
            flush_run(t);  // the run before the gap ends; the one after starts anew
            i = std::min(view.size, gaps_[gap].second - view.begin);
            continue;
        }
        const int64_t stop =
            gap < gaps_.size() ? std::min(view.size, gaps_[gap].first - view.begin) : view.size;
        known_stretch(i, stop);
        i = stop;
    }
}

void PosteriorTracks::block(const BlockView& view) {
    const int S = view.states;
    if (!started_) {
        started_ = true;
        if (forked_ && view.begin > 0)
            for (auto& t : tracks_) {
                t->holding = true;
                t->held = false;
            }
    }
    unknown_runs_in(*contig_, view.begin, view.begin + view.size, assembly_gap_min_length, gaps_);
    for (auto& tp : tracks_) {
        Track& t = *tp;
        if (options_.bin == 1) {
            per_base_values(t, view);
            continue;
        }
        size_t gap = 0;
        for (int64_t i = 0; i < view.size; ++i) {
            const int64_t pos = view.begin + i;
            while (gap < gaps_.size() && gaps_[gap].second <= pos) ++gap;
            const bool no_data = gap < gaps_.size() && gaps_[gap].first <= pos;
            if (t.bin_fill == 0) t.bin_begin = pos;
            if (!no_data) {
                t.bin_sum += region_posterior(t, view.posterior + i * S);
                ++t.bin_known;
            }
            if (++t.bin_fill == options_.bin) end_bin(t, pos + 1);
        }
    }
}

void PosteriorTracks::end_contig(const Contig&, const DecodeResult&) {
    ended_ = true;
    for (auto& t : tracks_) {
        if (t->bin_fill > 0) end_bin(*t, t->bin_begin + t->bin_fill);  // the last, shorter bin
        t->bin_fill = 0;
        t->bin_known = 0;
        t->bin_sum = 0;
        flush_run(*t);
    }
}

void PosteriorTracks::close() {
    for (auto& t : tracks_) {
        if (forked_) throw InternalError("PosteriorTracks::close on a fork; join it instead");
        if (t->bigwig) {
            if (!t->bigwig->empty()) t->bigwig->close();
            continue;
        }
        t->file->write(t->buffer);
        t->buffer.clear();
        t->file->commit();
    }
}

}  // namespace tidemark
