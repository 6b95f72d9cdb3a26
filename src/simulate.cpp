// Simulation from a compiled profile: hidden chain, context-dependent emissions and N gaps.
#include "tidemark/simulate.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <memory>

#include "rng.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/progress.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {
namespace {

constexpr int64_t block_positions = int64_t{1} << 16;
constexpr char base_letters[5] = {'A', 'C', 'G', 'T', 'N'};

// Every probability of the model turned into 53-bit thresholds once, laid out like the
// Model's own tables so that the same offsets index both.
struct SamplingTables {
    std::vector<uint64_t> initial;     // S
    std::vector<uint64_t> transition;  // parallel to Model::out_prob
    std::vector<uint64_t> emission;    // parallel to Model::emission
};

SamplingTables build_tables(const Model& m) {
    SamplingTables t;
    t.initial.resize(m.states);
    detail::categorical_thresholds(m.initial.data(), m.states, t.initial.data());
    t.transition.resize(m.out_prob.size());
    for (int s = 0; s < m.states; ++s) {
        const int b = m.out_begin[s];
        detail::categorical_thresholds(m.out_prob.data() + b, m.out_begin[s + 1] - b,
                                       t.transition.data() + b);
    }
    t.emission.resize(m.emission.size());
    for (size_t row = 0; row < m.emission.size(); row += 4)
        detail::categorical_thresholds(m.emission.data() + row, 4, t.emission.data() + row);
    return t;
}

// The known/unknown chain of SimulateOptions, as thresholds: a draw below the threshold
// switches (or, at a contig start, below `start_gap` starts inside a gap).
struct GapChain {
    bool enabled = false;
    uint64_t start_gap = 0, leave_gap = 0, enter_gap = 0;
};

uint64_t probability_threshold(double p) {
    const double scaled = p * static_cast<double>(detail::unit53);
    return scaled >= static_cast<double>(detail::unit53) ? detail::unit53
                                                         : static_cast<uint64_t>(scaled);
}

GapChain build_gap_chain(const SimulateOptions& o) {
    GapChain g;
    if (!(o.gap_fraction > 0)) return g;
    g.enabled = true;
    const double f = o.gap_fraction;
    const double leave = 1.0 / o.gap_mean_length;
    const double enter = f / ((1.0 - f) * o.gap_mean_length);  // 1 / mean known-run length
    g.start_gap = probability_threshold(f);
    g.leave_gap = probability_threshold(leave);
    g.enter_gap = probability_threshold(enter);
    return g;
}

// The bases of one window of a signature state, exactly from the model (profile.hpp,
// WindowSignature): a fair coin picks the strand; on the reverse strand the chain runs over the
// window's known/unknown pattern reversed and the result is reverse-complemented into place.
// Along the chain, the transition rows drawn once per window from their Dirichlet are integrated
// out by Polya's urn: base b after context c has probability (a_cb + n_cb) / (A_c + n_c) with n
// the window's counts so far (Minka 2000, "Estimating a Dirichlet distribution", on the Polya
// distribution), which gives exactly the Dirichlet-Markov window probability; a base with fewer
// than k-1 known predecessors is uniform. Only additions and divisions (correctly rounded) feed
// the categorical thresholds, so draws are the same on every machine. On entry bases[i] is
// base_unknown for an unknown position and anything else for a known one.
void draw_signature_window(const Model& m, int state, detail::Xoshiro256ss& rng,
                           std::vector<uint8_t>& bases) {
    const int k = m.signature_k;
    const size_t K = size_t{1} << (2 * k);
    const uint32_t contexts = static_cast<uint32_t>(K / 4);
    const double* alpha = m.sig_alpha.data() + static_cast<size_t>(state) * K;
    const bool reverse = (rng.next53() >> 52) != 0;
    if (reverse) std::reverse(bases.begin(), bases.end());
    std::vector<double> n(K, 0.0);
    uint32_t code = 0;
    int run = 0;
    double p[4];
    uint64_t thresholds[4];
    for (uint8_t& base : bases) {
        if (base == base_unknown) {
            run = 0;
            code = 0;
            continue;
        }
        int b;
        if (run >= k - 1) {
            const uint32_t c = code & (contexts - 1);
            for (int x = 0; x < 4; ++x) p[x] = alpha[c * 4 + x] + n[c * 4 + x];
            detail::categorical_thresholds(p, 4, thresholds);
            b = detail::sample_categorical(thresholds, 4, rng.next53());
            n[c * 4 + b] += 1;
        } else {
            b = static_cast<int>(rng.next() >> 62);  // uniform
        }
        base = static_cast<uint8_t>(b);
        code = (code << 2) | static_cast<uint32_t>(b);
        ++run;
    }
    if (reverse) {
        std::reverse(bases.begin(), bases.end());
        for (uint8_t& base : bases)
            if (base != base_unknown) base = static_cast<uint8_t>(3 - base);
    }
}

}  // namespace

void validate(const SimulateOptions& o) {
    if (o.lengths.empty())
        throw UsageError(
            "simulate needs contig lengths: --lengths L1,L2,... or --contigs N --length L");
    for (size_t i = 0; i < o.lengths.size(); ++i)
        if (o.lengths[i] < 1)
            throw UsageError(
                fmt::format("contig length {} (entry {}) must be at least 1", o.lengths[i], i + 1));
    if (!(o.gap_fraction >= 0) || !(o.gap_fraction < 1))
        throw UsageError(fmt::format("--gaps {} must be in [0, 1)", o.gap_fraction));
    if (!(o.gap_mean_length >= 1) || !std::isfinite(o.gap_mean_length))
        throw UsageError(fmt::format("--gap-length {} must be at least 1", o.gap_mean_length));
    const double most = o.gap_mean_length / (o.gap_mean_length + 1);
    if (o.gap_fraction > most)
        throw UsageError(fmt::format(
            "--gaps {} is too large for --gap-length {}: known runs would average less than one "
            "base (the largest fraction for this gap length is {:.6g})",
            o.gap_fraction, o.gap_mean_length, most));
    if (o.name_prefix.empty() || o.name_prefix.find_first_of(" \t\r\n>") != std::string::npos)
        throw UsageError("--prefix must be non-empty and contain no whitespace or '>'");
}

void simulate(const Model& m, const SimulateOptions& o, SimulationSink& sink) {
    validate(o);
    const bool signature = m.signature_k > 0;
    if (signature && m.window_gc)
        throw ProfileError(fmt::format(
            "profile '{}' multiplies a gc and a signature emission, which is no generative model "
            "to draw from; simulate draws from profiles with one of the two",
            m.name));
    std::vector<uint8_t> window_bases;  // signature models: the current window, drawn whole
    const SamplingTables tables = build_tables(m);
    const GapChain gaps = build_gap_chain(o);
    detail::Xoshiro256ss rng(o.seed);
    std::vector<int> states(block_positions);
    std::vector<uint8_t> bases(block_positions);

    for (size_t c = 0; c < o.lengths.size(); ++c) {
        const int64_t length = o.lengths[c];
        sink.begin_contig(fmt::format("{}{}", o.name_prefix, c + 1), length);
        int state = -1;
        bool in_gap = false;
        RollingContext ctx(m.max_order);   // as in the decoder
        double urn_gc = 0, urn_known = 0;  // window models: G+C and known bases drawn in the window
        for (int64_t start = 0; start < length; start += block_positions) {
            const int64_t n = std::min(block_positions, length - start);
            for (int64_t t = 0; t < n; ++t) {
                if (signature) {
                    // Signature models draw a window at its first base (gaps of the whole
                    // window, state, then its bases: draw_signature_window).
                    if ((start + t) % m.window == 0) {
                        const int64_t size = std::min(m.window, length - (start + t));
                        window_bases.assign(static_cast<size_t>(size), 0);
                        for (int64_t i = 0; i < size; ++i) {
                            if (gaps.enabled) {
                                const uint64_t r = rng.next53();
                                if (start + t + i == 0)
                                    in_gap = r < gaps.start_gap;
                                else if (in_gap)
                                    in_gap = !(r < gaps.leave_gap);
                                else
                                    in_gap = r < gaps.enter_gap;
                            }
                            window_bases[static_cast<size_t>(i)] = in_gap ? base_unknown : 0;
                        }
                        if (state < 0) {
                            state = detail::sample_categorical(tables.initial.data(), m.states,
                                                               rng.next53());
                        } else {
                            const int b = m.out_begin[state];
                            const int k = detail::sample_categorical(tables.transition.data() + b,
                                                                     m.out_begin[state + 1] - b,
                                                                     rng.next53());
                            state = m.out_to[b + k];
                        }
                        draw_signature_window(m, state, rng, window_bases);
                    }
                    states[t] = state;
                    bases[t] = window_bases[static_cast<size_t>((start + t) % m.window)];
                    continue;
                }
                // Draw order per position (part of the seed's meaning): gap, state, base.
                if (gaps.enabled) {
                    const uint64_t r = rng.next53();
                    if (state < 0)
                        in_gap = r < gaps.start_gap;
                    else if (in_gap)
                        in_gap = !(r < gaps.leave_gap);
                    else
                        in_gap = r < gaps.enter_gap;
                }
                if (state < 0) {
                    state =
                        detail::sample_categorical(tables.initial.data(), m.states, rng.next53());
                } else if (m.window > 0 && (start + t) % m.window != 0) {
                    // window models move once per window
                } else {
                    const int b = m.out_begin[state];
                    const int k = detail::sample_categorical(
                        tables.transition.data() + b, m.out_begin[state + 1] - b, rng.next53());
                    state = m.out_to[b + k];
                }
                states[t] = state;
                if (m.window > 0 && (start + t) % m.window == 0) urn_gc = urn_known = 0;
                if (in_gap) {
                    bases[t] = base_unknown;
                    ctx.push(base_unknown);
                    continue;
                }
                if (m.window > 0) {
                    // Polya's urn: the next known base is G or C with probability
                    // (alpha + gc so far) / (alpha + beta + known so far), which makes the window's
                    // G+C count beta-binomial (Johnson, Kemp & Kotz 2005, Univariate Discrete
                    // Distributions, 3rd ed., section 6.2.2, from memory); C or G (A or T) with
                    // probability 1/2 each. IEEE division is exact to the last bit everywhere, so
                    // the draws stay reproducible.
                    const double p_gc = (m.gc_alpha[state] + urn_gc) /
                                        (m.gc_alpha[state] + m.gc_beta[state] + urn_known);
                    const bool gc = rng.next53() < probability_threshold(p_gc);
                    const bool second = (rng.next53() >> 52) != 0;
                    bases[t] = gc ? (second ? base_g : base_c) : (second ? base_t : base_a);
                    urn_gc += gc ? 1 : 0;
                    urn_known += 1;
                    continue;
                }
                const uint32_t row = ctx.row(m.order_of_state[state]);
                const uint64_t* th = tables.emission.data() + m.emission_offset[state] + row * 4;
                const auto base =
                    static_cast<uint8_t>(detail::sample_categorical(th, 4, rng.next53()));
                bases[t] = base;
                ctx.push(base);
            }
            SimulatedBlock view;
            view.begin = start;
            view.size = n;
            view.states = states.data();
            view.bases = bases.data();
            sink.block(view);
        }
        sink.end_contig();
    }
}

FastaFormatter::FastaFormatter(TextWriter out, int line_width)
    : out_(std::move(out)), width_(line_width) {
    if (line_width < 0) throw UsageError("--line-width must be >= 0");
}

void FastaFormatter::begin_contig(const std::string& name, int64_t /*length*/) {
    buffer_.clear();
    buffer_ += '>';
    buffer_ += name;
    buffer_ += '\n';
    column_ = 0;
}

void FastaFormatter::block(const SimulatedBlock& b) {
    for (int64_t t = 0; t < b.size; ++t) {
        if (width_ > 0 && column_ == width_) {
            buffer_ += '\n';
            column_ = 0;
        }
        buffer_ += base_letters[b.bases[t]];
        ++column_;
    }
    out_(buffer_);
    buffer_.clear();
}

void FastaFormatter::end_contig() {
    if (column_ > 0) buffer_ += '\n';
    out_(buffer_);
    buffer_.clear();
}

TruthFormatter::TruthFormatter(TextWriter out, const Model& model)
    : out_(std::move(out)), model_(model) {}

void TruthFormatter::begin_contig(const std::string& name, int64_t /*length*/) {
    name_ = name;
    region_ = -1;
    begin_ = 0;
    buffer_.clear();
}

void TruthFormatter::flush_segment(int64_t end) {
    if (region_ < 0) return;
    buffer_ += fmt::format("{}\t{}\t{}\t{}\n", name_, begin_, end, model_.region_names[region_]);
}

void TruthFormatter::block(const SimulatedBlock& b) {
    for (int64_t t = 0; t < b.size; ++t) {
        const int region = model_.region_of_state[b.states[t]];
        if (region != region_) {
            flush_segment(b.begin + t);
            region_ = region;
            begin_ = b.begin + t;
        }
    }
    end_ = b.begin + b.size;
    out_(buffer_);
    buffer_.clear();
}

void TruthFormatter::end_contig() {
    flush_segment(end_);
    out_(buffer_);
    buffer_.clear();
    region_ = -1;
}

void validate(const SimulateJob& job) {
    validate(job.simulation);
    if (job.line_width < 0) throw UsageError("--line-width must be >= 0 (0 = one line per contig)");
    if (!job.truth.empty() && job.truth == job.output && job.output != "-" &&
        job.output.rfind("/dev/", 0) != 0)
        throw UsageError("--truth and --output name the same file");
    if (job.truth == "-" && job.output == "-")
        throw UsageError("--truth - and the FASTA both go to stdout; give -o FILE or a truth file");
}

namespace {

// Region totals for the log, counted from the states the formatters also see.
class TotalsSink final : public SimulationSink {
public:
    TotalsSink(const Model& m, SimulationTotals& totals) : model_(m), totals_(totals) {
        totals_.region_bases.assign(m.region_names.size(), 0);
    }
    void begin_contig(const std::string&, int64_t length) override {
        ++totals_.contigs;
        totals_.bases += length;
    }
    void block(const SimulatedBlock& b) override {
        for (int64_t t = 0; t < b.size; ++t) {
            ++totals_.region_bases[model_.region_of_state[b.states[t]]];
            totals_.unknown += (b.bases[t] == base_unknown);
        }
    }

private:
    const Model& model_;
    SimulationTotals& totals_;
};

class Fanout final : public SimulationSink {
public:
    explicit Fanout(std::vector<SimulationSink*> sinks) : sinks_(std::move(sinks)) {}
    void begin_contig(const std::string& name, int64_t length) override {
        for (auto* s : sinks_) s->begin_contig(name, length);
    }
    void block(const SimulatedBlock& b) override {
        for (auto* s : sinks_) s->block(b);
    }
    void end_contig() override {
        for (auto* s : sinks_) s->end_contig();
    }

private:
    std::vector<SimulationSink*> sinks_;
};

}  // namespace

SimulationTotals run_simulate(const SimulateJob& job, const Logger& log) {
    validate(job);
    const Stopwatch clock;
    const Profile profile = load_profile(job.profile);
    const Model model = compile(profile);

    OutputFile fasta(job.output);
    std::unique_ptr<OutputFile> truth;
    if (!job.truth.empty()) {
        truth = std::make_unique<OutputFile>(job.truth);
        // No command line here: the file must depend on the seed and the model only.
        truth->write(fmt::format(
            "# tidemark {} simulate: profile {}, seed {}; columns chrom start end region\n",
            TIDEMARK_VERSION, model.name, job.simulation.seed));
    }
    SimulationTotals totals;
    FastaFormatter fasta_sink([&](std::string_view text) { fasta.write(text); }, job.line_width);
    std::unique_ptr<TruthFormatter> truth_sink;
    TotalsSink totals_sink(model, totals);
    std::vector<SimulationSink*> sinks = {&fasta_sink, &totals_sink};
    if (truth) {
        truth_sink = std::make_unique<TruthFormatter>(
            [&](std::string_view text) { truth->write(text); }, model);
        sinks.push_back(truth_sink.get());
    }
    Fanout fanout(sinks);
    simulate(model, job.simulation, fanout);
    if (truth) truth->commit();
    fasta.commit();

    std::string regions;
    for (size_t r = 0; r < totals.region_bases.size(); ++r)
        regions +=
            fmt::format("{}{} {}", r ? ", " : "", model.region_names[r], totals.region_bases[r]);
    log.detail(fmt::format(
        "simulated {} contigs, {} bases ({} unknown) from profile {} with seed {}; bases "
        "per region: {}",
        totals.contigs, totals.bases, totals.unknown, model.name, job.simulation.seed, regions));
    const ResourceUsage usage = clock.now();
    log.detail(fmt::format(
        "{:.2f} s wall, {:.2f} s CPU, {:.2f} Mbp/s, peak memory {:.1f} MiB", usage.wall_seconds,
        usage.cpu_seconds,
        usage.wall_seconds > 0 ? static_cast<double>(totals.bases) / 1e6 / usage.wall_seconds : 0.0,
        static_cast<double>(usage.peak_rss_bytes) / (1 << 20)));
    return totals;
}

}  // namespace tidemark
