// Profiles: region-type HMMs in tidemark's JSON format (tidemark-profile/1), their validation,
// the built-in set, and compilation into the flat Model that the decoders run on.
#pragma once

#include <array>
#include <cstdint>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "tidemark/sequence.hpp"

namespace tidemark {

class ClassBaseScores;  // window.hpp

inline constexpr const char* profile_format = "tidemark-profile/1";
inline constexpr int max_emission_order = 5;
/// Upper bound on the number of compiled states (duration chains included): the decoders also
/// keep a dense S x S transition matrix, 32 MiB at this size.
inline constexpr int max_compiled_states = 2048;
/// Upper bound on the window states one state's GC mean orders (gc.below / gc.above): the
/// constrained M-step tries all 2^n ways of tying them to it.
inline constexpr int max_gc_ordered = 8;

/// A region type: what a call is named after. Several states may belong to one region.
struct RegionSpec {
    std::string name;
    bool report = false;      ///< calls and tracks are made for reportable regions only
    std::string description;  ///< optional free text
    std::string color;        ///< optional "R,G,B" for browser tracks ("" = tidemark's palette)
    /// Shortest possible segment (a maximal run of this region's states), in bases (window
    /// profiles: rounded up to whole windows, L = ceil(min_length / window size)). L > 1 is
    /// compiled into a chain of L copies of each of the region's states: copies 1..L-1 can only
    /// step to the next copy (of any state of the region, with the in-region transitions
    /// renormalised), copy L has the state's own transitions, so after the chain the length is
    /// geometric. A segment cut by the end of a contig may be shorter.
    int64_t min_length = 1;
};

/// Window-level emission of a state (profiles with a window size): the G+C count k of a window's
/// n known bases is beta-binomial with mean `mean` and intra-window correlation `dispersion`
/// (rho): alpha = mean (1/rho - 1), beta = (1 - mean)(1/rho - 1), so the variance of the window's
/// GC fraction is mean (1 - mean) (1/n + rho (n-1)/n). rho -> 0 is the binomial (a homogeneous
/// source); larger rho lets a domain's windows scatter around its mean, which bounds the evidence
/// one window carries however many bases it has.
struct WindowGC {
    double mean = 0.5;         ///< in (0, 1)
    double dispersion = 0.01;  ///< rho, in (0, 1)
};

/// Largest k-mer length of a window signature (an order k-1 Markov chain; 4^k counts per window).
inline constexpr int max_signature_k = 4;

/// Window-level composition signature of a state (profiles with a window size; optional, alone
/// or with WindowGC, the two multiplied): a Dirichlet-Markov chain. The window's known bases
/// follow an order-(k-1) Markov chain whose transition row for each context c (the k-1 preceding
/// bases, oldest most significant, A<C<G<T) is drawn once per window from
/// Dirichlet(concentration[c] * mean[c]). Integrating the rows out gives the Polya sequence
/// probability per context, prod_c Gamma(A_c) / Gamma(A_c + n_c) prod_b Gamma(a_cb + n_cb) /
/// Gamma(a_cb) (a_cb = concentration[c] mean[c][b], A_c = concentration[c], n_cb the window's
/// count of k-mer cb), with no multinomial coefficient: it is the probability of the sequence.
/// Bases without k-1 known predecessors (a contig's or window's start, just after an unknown
/// base) are uniform, 1/4 in every state. Strands: the window is read on a strand drawn with
/// probability 1/2 each (the likelihood averages the forward counts and the reverse-complement
/// counts), so an island looks alike on either strand. Low concentration lets a window's rows
/// depart far from the mean: the signature of atypical (foreign) DNA.
struct WindowSignature {
    int k = 0;                                ///< 0: no signature; else 1..max_signature_k
    std::vector<double> concentration;        ///< 4^(k-1) values, each > 0
    std::vector<std::array<double, 4>> mean;  ///< 4^(k-1) rows, each summing to 1, entries > 0
    /// The state whose concentration this state's stays at or below, context by context
    /// (signature.concentration_below; "" = unconstrained): an atypical class stays more diverse
    /// than the typical one through training (train.hpp, maximise).
    std::string concentration_reference;
    bool present() const { return k > 0; }
};

/// A hidden state. Per-base profiles: an order-k context model, emissions[ctx][base] =
/// P(base | k preceding bases), ctx indexing the k preceding bases with A<C<G<T and the oldest
/// most significant. Window profiles (Profile::window_size > 0): a WindowGC distribution; order
/// is 0 and emissions is empty.
struct StateSpec {
    std::string name;
    int region = 0;                                ///< index into Profile::regions
    int order = 0;                                 ///< 0..max_emission_order
    std::vector<std::array<double, 4>> emissions;  ///< 4^order rows, each summing to 1
    WindowGC gc;                                   ///< window profiles only
    /// Window profiles: whether the state has a "gc" emission. A window profile's states all
    /// carry the same kinds: gc, signature, or both.
    bool has_gc = true;
    WindowSignature signature;  ///< window profiles only (signature.k == 0: none)
    /// Tie group: states that name the same non-empty group share one emission table (same
    /// order, identical rows), and training estimates it from their pooled counts.
    std::string tie;
    /// Window states: the state whose GC mean this state's mean stays on one side of
    /// (gc.below / gc.above in the file; "" = unconstrained), so that a class named for a GC
    /// direction keeps it: training maximises under this order (train.hpp, maximise). The
    /// reference is itself unconstrained, and neither is tied.
    std::string gc_reference;
    int gc_side = 0;  ///< -1: mean <= the reference's mean (below); +1: mean >= it (above)
};

/// A fitted genome's screen for foreign contigs (contig_screen.hpp): where the trinucleotide
/// signatures of the genome's own stretches lie, and how far from there a stretch of each length
/// still belongs to it. Written by tidemark fit for islands templates; absent otherwise.
struct ContigScreen {
    std::vector<double> center;     ///< 32 values (contig_screen.hpp: trinucleotide_signature)
    std::vector<double> precision;  ///< 32 x 32, row-major: the inverse of the robust covariance
    std::vector<int64_t> lengths;   ///< known bases, increasing
    std::vector<double> limits;     ///< per length: the largest distance of the genome's own
    bool present() const { return !center.empty(); }
};

/// Interval-calling defaults a profile may carry (overridden by command-line options).
struct CallingDefaults {
    double min_posterior = 0.5;
    int64_t min_length = 1;
    int64_t merge_gap = 0;
    /// Window profiles: a call's ends between two classes are moved from the window grid to the
    /// base where the change from one class to the other is most likely (calling.refine_ends;
    /// IntervalCaller, call.hpp). Off by default: isochores are domains of the window scale.
    bool refine_ends = false;
};

/// A validated profile as written in its file.
struct Profile {
    std::string name;
    std::string description;
    std::vector<std::string> sources;  ///< where the numbers come from
    std::vector<RegionSpec> regions;
    std::vector<StateSpec> states;
    std::vector<double> initial;                   ///< per state, sums to 1
    std::vector<std::vector<double>> transitions;  ///< [from][to], each row sums to 1
    CallingDefaults calling;
    std::string provenance_json;  ///< optional free-form object kept verbatim ("" when absent)
    /// Window profiles: bases per window (the sequence is cut into windows of this size from each
    /// contig's start; the last may be shorter). 0 = per-base emissions.
    int64_t window_size = 0;
    /// Window profiles: a window with fewer known bases than this carries no evidence: it emits
    /// 1 in every state, like a window of unknown bases, so that its posterior is what its
    /// neighbours and the transitions support (window.min_known; 1 = every window with a known
    /// base counts).
    int64_t window_min_known = 1;
    /// A template: its emissions only fix the classes' order, and fit reseeds them from the data
    /// before Baum-Welch (as --init-from-data does). Fitted profiles are not templates.
    bool is_template = false;
    ContigScreen contig_screen;  ///< fitted islands profiles only

    bool windowed() const { return window_size > 0; }
    /// Compiled chain length of region r: min_length in bases, or in whole windows.
    int64_t chain_length(int r) const;
    int state_index(std::string_view state) const;    ///< -1 when absent
    int region_index(std::string_view region) const;  ///< -1 when absent
};

/// Scanning needs fitted classes: a template's emissions are placeholders that only fix the
/// classes' order (fit reseeds them on the genome), so decoding with them labels a genome by
/// numbers nobody fitted. Throws ProfileError naming `tidemark fit` when profile.is_template.
/// Simulation may draw from a template (its placeholders define a model like any other).
void require_fitted(const Profile& profile);

/// Parses and validates profile JSON. origin names the source in error messages.
/// Throws ProfileError naming the offending field: unknown or missing fields, rows that do not
/// sum to 1 within 1e-6, negative or non-finite values, unresolved names, an order outside
/// 0..5, no reportable region; a region min_length below 1, a chain region whose state cannot
/// stay in the region, more than max_compiled_states compiled states; tied states that differ
/// in order or emissions.
/// Optional fields: regions[].min_length (default 1) and states[].tie (default none).
Profile parse_profile(std::string_view json_text, const std::string& origin);

/// Canonical JSON text of a profile (stable key order; parse_profile(to_json(p)) == p).
std::string to_json(const Profile& profile);

/// CRC-32 of the profile's canonical JSON (to_json), 8 hex digits: recorded by scan, checked by
/// merge.
std::string profile_checksum(const Profile& profile);

/// A profile compiled into the binary from data/profiles/NAME.json.
struct BuiltinProfile {
    std::string_view name;
    std::string_view json;
};
const std::vector<BuiltinProfile>& builtin_profiles();

/// A built-in by name, otherwise a file path. Throws ProfileError when neither exists.
Profile load_profile(const std::string& name_or_path);

/// The context of a position for order-k emissions: the codes of the known bases just before it
/// (newest in the low 2 bits, at most max_order of them) and how many consecutive known bases
/// precede it. Its rule picks a state's emission row: the row of the k preceding bases when at
/// least k known bases precede the position, else the state's mean row (row 4^k: the contig
/// start, just after an unknown base). Decoding, training, simulation and seeding all roll and
/// select with it, so they cannot disagree.
struct RollingContext {
    uint32_t code = 0;
    int64_t valid = 0;  ///< consecutive known bases just before the position

    explicit RollingContext(int max_order = max_emission_order)
        : mask_((1u << (2 * max_order)) - 1) {}
    /// Moves past one base; an unknown base empties the context.
    void push(uint8_t base) {
        if (base == base_unknown) {
            code = 0;
            valid = 0;
        } else {
            code = ((code << 2) | base) & mask_;
            ++valid;
        }
    }
    /// True when the k preceding bases are all known.
    bool complete(int order) const { return valid >= order; }
    /// The emission row of a state of this order.
    uint32_t row(int order) const { return row_of(order, code, valid); }
    static uint32_t row_of(int order, uint32_t code, int64_t valid) {
        return valid >= order ? (code & ((1u << (2 * order)) - 1)) : (1u << (2 * order));
    }

private:
    uint32_t mask_;
};

/// The context at position pos of a contig, from the (at most max_order) bases before it.
inline RollingContext context_before(const Contig& contig, int64_t pos, int max_order) {
    RollingContext ctx(max_order);
    const int64_t look = pos < max_order ? pos : max_order;
    uint8_t before[max_emission_order];
    contig.unpack(pos - look, look, before);
    for (int64_t k = 0; k < look; ++k) ctx.push(before[k]);
    return ctx;
}

/// The flattened model: dense and sparse transitions, per-state emission tables with a
/// precomputed mean row (used where fewer than k known bases precede a position).
struct Model {
    int states = 0;
    int max_order = 0;
    /// Window profiles: bases per decoding position (positions are windows); 0 = per base.
    int64_t window = 0;
    /// Window profiles: windows with fewer known bases emit 1 (Profile::window_min_known).
    int64_t window_min_known = 1;
    /// Window profiles: calls' ends are refined at base resolution (CallingDefaults::refine_ends).
    bool refine_ends = false;
    /// Set on region_view(model) of a window model whose calls' ends are refined: each region's
    /// per-base score (window.hpp), with which the caller places ends inside windows.
    std::shared_ptr<const ClassBaseScores> class_base_scores;
    /// Region views of window profiles (window.hpp: region_view), whose positions are bases: the
    /// window size of the model they view (0 otherwise); window_min_known is the viewed one's.
    int64_t viewed_window = 0;
    /// Region views of window profiles with a signature: calls carry their signature distance
    /// from their record (Call::signature_distance).
    bool signature_evidence = false;
    /// The profile's contig screen (shared by a model and its region view); null when absent.
    std::shared_ptr<const ContigScreen> contig_screen;
    /// Window profiles, per compiled state: the beta-binomial's alpha and beta, and
    /// lbeta(alpha, beta) (the normaliser, precomputed).
    std::vector<double> gc_alpha, gc_beta, gc_lbeta;
    /// Window profiles: whether the states emit the G+C count (false: signature only).
    bool window_gc = true;
    /// Window profiles with a signature: its k (0 = none), and per compiled state the Dirichlet
    /// parameters sig_alpha[s * 4^k + code] of k-mer `code` (context * 4 + next base), so that
    /// context c's row starts at (s * 4^(k-1) + c) * 4.
    int signature_k = 0;
    std::vector<double> sig_alpha;
    std::string name;
    std::vector<std::string> state_names;  ///< chain copies are named "state[c/L]"
    std::vector<std::string> region_names;
    std::vector<bool> region_report;
    std::vector<std::string> region_colors;  ///< "R,G,B" or "" (use tidemark's palette)
    std::vector<int> region_of_state;
    std::vector<int> order_of_state;
    /// Per compiled state: the profile state it copies, its place c (1..L) in its region's
    /// min_length chain and the chain length L (1 for regions without a chain).
    std::vector<int> profile_state;
    std::vector<int> chain_copy;
    std::vector<int> chain_length;
    std::vector<double> initial;      ///< S
    std::vector<double> transitions;  ///< S*S row-major, [from*S + to]

    /// Non-zero transitions into each state (CSR: in_begin has S+1 entries).
    std::vector<int> in_begin, in_from;
    std::vector<double> in_prob;
    /// Non-zero transitions out of each state.
    std::vector<int> out_begin, out_to;
    std::vector<double> out_prob;

    /// Per state, 4^k + 1 rows of 4 probabilities; row 4^k is the mean row. Chain copies share
    /// the table of the profile state they copy.
    std::vector<size_t> emission_offset;
    std::vector<double> emission;

    /// Decoding positions of a contig of this many bases (windows, or bases).
    /// (ceil(length / window), written so that it cannot overflow)
    int64_t positions(int64_t length) const {
        return window > 0 && length > 0 ? (length - 1) / window + 1 : length;
    }
    /// First base of decoding position pos.
    int64_t position_start(int64_t pos) const { return window > 0 ? pos * window : pos; }

    /// P(base | context) for state s; valid = number of consecutive known bases before the
    /// position, ctx = rolling code of the preceding bases (newest in the low 2 bits).
    double emission_prob(int s, uint32_t ctx, int64_t valid, uint8_t base) const {
        const uint32_t row = RollingContext::row_of(order_of_state[s], ctx, valid);
        return emission[emission_offset[s] + row * 4 + base];
    }
};

/// Compiles a validated profile: expands min_length chains (a region with L > 1 turns each of
/// its n states into L compiled states, so S grows to sum of L per state and the non-zero
/// transitions by about n x L; the posterior decoder's work per base is linear in those).
Model compile(const Profile& profile);

}  // namespace tidemark
