// Training: expected counts from the posterior engine (E-step), Dirichlet-smoothed
// re-estimation (M-step), the Baum-Welch driver with restarts, labelled counting, templates
// seeded from the data, and choice of the number of classes by BIC.
#pragma once

#include <array>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "tidemark/decode.hpp"
#include "tidemark/intervals.hpp"
#include "tidemark/log.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"
#include "tidemark/shard_spec.hpp"

namespace tidemark {

// ---------------------------------------------------------------------------------------------
// Training data

/// The pieces of a split record (one whose segments several processes decode; the scale-out
/// layer, shard.hpp) that this process decodes, and what it needs to decode them as one
/// process would: the seams of every segment of the record.
struct SplitRecordPart {
    size_t segments = 0;                            ///< of the whole record
    std::vector<std::pair<size_t, size_t>> pieces;  ///< segments [first, last) decoded here
    std::vector<SegmentSeam> seams;                 ///< of every segment, from every process
};

/// The sequences a profile is trained on, read once per pass (EM makes one pass per
/// iteration), so that memory stays that of one contig as in scan.
class TrainingData {
public:
    virtual ~TrainingData() = default;
    /// Calls fn for every contig, in the same order on every pass.
    virtual void for_each(const std::function<void(const Contig&)>& fn) = 0;
    /// During for_each: true when the contig being passed is a split record, of which the
    /// E-step decodes only this process's pieces (split_part). Only sharded data (the scale-out
    /// layer) have split records.
    virtual bool current_is_split() const { return false; }
    /// During for_each, for a split record (current_is_split): its part decoded here. Throws
    /// when the seams of the record are not at hand.
    virtual SplitRecordPart split_part(const Contig& /*contig*/) const { return {}; }
};

/// What one pass saw of one record (for provenance).
struct SequenceRecord {
    std::string input;  ///< file as given
    std::string name;
    int64_t offset = 0;  ///< start on the named sequence (regions)
    int64_t length = 0;
    int64_t unknown = 0;
};

/// FASTA files (all records pooled) or, with region strings / a regions BED, those regions of a
/// single indexed file. Regions are resolved in the constructor (errors before any output).
/// Standard input can be read only once, so "-" is refused (training makes several passes).
class FastaTrainingData final : public TrainingData {
public:
    FastaTrainingData(std::vector<std::string> inputs, const std::vector<std::string>& regions,
                      const std::string& regions_bed, SoftMasked soft_masked = SoftMasked::base);
    void for_each(const std::function<void(const Contig&)>& fn) override;
    /// The records of the first complete pass, in order.
    const std::vector<SequenceRecord>& records() const { return records_; }

private:
    std::vector<std::string> inputs_;
    std::vector<Region> regions_;
    SoftMasked soft_masked_ = SoftMasked::base;
    Contig contig_;
    std::vector<SequenceRecord> records_;
    bool recorded_ = false;
};

/// Contigs held in memory (tests, small inputs).
class MemoryTrainingData final : public TrainingData {
public:
    explicit MemoryTrainingData(std::vector<Contig> contigs) : contigs_(std::move(contigs)) {}
    void for_each(const std::function<void(const Contig&)>& fn) override;

private:
    std::vector<Contig> contigs_;
};

// ---------------------------------------------------------------------------------------------
// Sufficient statistics

/// One window of a window profile in the E-step: its G+C count, its known bases, and the
/// posterior of each profile state (chain copies pooled). The beta-binomial M-step needs the
/// windows themselves (it has no fixed-size sufficient statistic); a genome has few of them.
struct WindowTally {
    int64_t gc = 0;
    int64_t known = 0;
    std::vector<double> weight;  ///< per profile state
    /// Signature profiles: the window's k-mer counts (WindowCount::kmers); empty otherwise.
    std::vector<uint32_t> kmers;
};

/// Expected (or, from labels, observed) counts at the level of the profile's parameters.
/// Chain copies of a state are pooled into that state.
struct TrainingCounts {
    std::vector<double> initial;  ///< per profile state: P(state at base 0) summed over contigs
    std::vector<std::vector<double>>
        transitions;  ///< [from][to] profile states, all chain copies pooled
    /// Per profile state: the part of its in-region transition counts made by chain copies
    /// 1..L-1 (forced steps; they carry the in-region shares but not the in/out split).
    std::vector<double> chain_steps;
    /// [profile state][context row][base], context rows as in StateSpec::emissions.
    std::vector<std::vector<std::array<double, 4>>> emissions;
    /// Window profiles: every window with known bases, in input order (add appends).
    std::vector<WindowTally> windows;
    double log_likelihood = 0;  ///< sum over contigs of ln P(contig)
    int64_t positions = 0;      ///< bases seen, known and unknown
    int64_t known = 0;          ///< bases A, C, G, T
    int64_t contigs = 0;        ///< non-empty contigs

    /// Zero counts shaped for a profile.
    static TrainingCounts zero(const Profile& profile);
    void add(const TrainingCounts& other);
};

/// The E-step as a decoder sink. For every position t > 0 of a contig it adds the expected
/// transition counts xi_t(i,j) = f_{t-1}(i) A_ij e_t(j) b_t(j) / sum_ij(...) (normalised per
/// position because each row of the scaled vectors has its own scale), and for every known base
/// the posterior P(state at t) to the state's row (context, base). A position whose full order-k
/// context is not available (fewer than k known bases just before it) is emitted in decoding by
/// the state's mean row, i.e. by a context drawn uniformly from all 4^k; it is counted as such a
/// latent context: its posterior is shared among the rows in proportion to each row's
/// probability of the base. This keeps EM exact (the log-likelihood cannot decrease). Unknown
/// bases add no emission counts. Position 0 gives the initial counts.
/// Work per base: O(non-zero transitions + states); no memory beyond the counts.
class CountAccumulator final : public DecodeSink {
public:
    CountAccumulator(const Profile& profile, const Model& model);
    void begin_contig(const Contig& contig) override;
    void block(const BlockView& view) override;
    void end_contig(const Contig& contig, const DecodeResult& result) override;
    /// Ends this shard's piece of a contig shared between shards: folds in the transition
    /// counts; the log-likelihood and the contig count only when the piece ends the contig.
    void end_piece(const DecodeResult& result, bool ends_contig);
    /// A fresh accumulator (zero counts) for a later contig or a later segment of the contig in
    /// progress (its expected transition sums are added before the contig's are folded in);
    /// join adds its counts to these.
    std::unique_ptr<DecodeSink> fork() const override;
    void join(DecodeSink& later) override;
    /// Counts so far (transition counts are folded in at each end_contig).
    const TrainingCounts& counts() const { return counts_; }

private:
    template <int Fixed>
    void add_transitions(const BlockView& view);
    void add_emissions(const BlockView& view);
    void add_window_emissions(const BlockView& view);

    const Profile& profile_;
    const Model& model_;
    bool sparse_ = false;
    TrainingCounts counts_;
    std::vector<double> edge_;    ///< per CSR out-edge, this contig (dense: S*S, without A)
    std::vector<double> part_;    ///< edge_'s share of the current block
    std::vector<double> weight_;  ///< per state e_t * b_t, scratch
    std::vector<double> pooled_;  ///< per profile state posterior, scratch
    const Contig* contig_ = nullptr;
    bool started_ = false;  ///< a block of the current span was seen
    RollingContext ctx_;    ///< rolling context over the largest order
};

/// Runs the posterior engine over all of data with profile's compiled model and returns the
/// expected counts. Throws InputError when a contig is impossible under the profile.
/// Contigs are decoded on `threads` threads (0 = every core); each contig's counts start from
/// zero and are added in input order, so the result is the same for any number of threads.
TrainingCounts expected_counts(const Profile& profile, TrainingData& data, int64_t block_size = 0,
                               int threads = 0);

// ---------------------------------------------------------------------------------------------
// M-step

/// Which parameters training leaves unchanged.
struct Freeze {
    bool initial = false;
    bool transitions = false;                    ///< every transition row
    bool emissions = false;                      ///< every emission table
    std::vector<std::string> transition_states;  ///< these states' transition rows
    std::vector<std::string> emission_states;  ///< these states' emission tables (whole tie group)
};

/// Parses one --freeze word: "initial", "transitions", "emissions", "transitions:STATE" or
/// "emissions:STATE" (states are checked later against the profile). Throws UsageError.
void parse_freeze(const std::string& word, Freeze& freeze);

/// Per-state freeze flags resolved against a profile. Throws UsageError for an unknown state.
struct FreezeMask {
    bool initial = false;
    std::vector<bool> transitions;  ///< per profile state
    std::vector<bool> emissions;    ///< per profile state (tie groups frozen as a whole)
};
FreezeMask resolve_freeze(const Freeze& freeze, const Profile& profile);

struct MStepOptions {
    /// Dirichlet pseudocount added to every entry that is non-zero in the structure profile
    /// (entries that are zero there stay zero): the MAP estimate under a Dirichlet(1 + a) prior.
    double pseudocount = 1.0;
};

/// New parameters from counts. Window states: the beta-binomial maximum-likelihood estimate from
/// the posterior-weighted windows by Minka's fixed-point iteration (Minka T (2000) "Estimating a
/// Dirichlet distribution", technical report, the Polya (Dirichlet-multinomial) case with two
/// categories), started from the current values, so EM never lowers the likelihood; no prior.
/// structure fixes which entries may be non-zero (normally the starting profile); current supplies
/// frozen values and rows without any count. Rows are normalised counts, except for states of a
/// min_length region, whose row is the exact maximiser for the chain: in-region shares from all
/// copies' counts, the in/out split from the tail copy's counts (in-region mass floored at 1e-12 so
/// the chain stays defined). Tie groups pool their members' emission counts.
Profile maximise(const Profile& structure, const Profile& current, const TrainingCounts& counts,
                 const FreezeMask& freeze, const MStepOptions& options);

/// sum of a * ln(theta) over the entries that receive pseudocounts (free parameters only): EM
/// with pseudocount a never decreases log-likelihood + this.
double log_prior(const Profile& structure, const Profile& current, const FreezeMask& freeze,
                 double pseudocount);

/// Number of free parameters: for every distribution that training may change, its number of
/// non-zero entries minus one (tie groups counted once).
int64_t free_parameters(const Profile& structure, const FreezeMask& freeze);

// ---------------------------------------------------------------------------------------------
// Baum-Welch

struct FitOptions {
    double pseudocount = 1.0;   ///< Dirichlet pseudocount per free entry (0 = maximum likelihood)
    int max_iter = 100;         ///< parameter updates at most (0 = only evaluate the start)
    double tol = 1e-6;          ///< stop when |relative log-likelihood change| falls below this
    uint64_t seed = 1;          ///< random seed of the restarts' perturbations
    int restarts = 1;           ///< runs: the first from the start profile, the others perturbed
    double perturbation = 0.5;  ///< restarts scale free entries by exp(U(-p, p)) and renormalise
    Freeze freeze;
    bool order_by_gc = false;  ///< reorder states and regions by GC (templates: class1..classK)
    int64_t block_size = 0;    ///< decoder block (0 = automatic)
    int threads = 0;           ///< E-step threads (0 = every core); results do not depend on it
};

/// One E-step of a run.
struct IterationRecord {
    int restart = 0;
    int iteration = 0;  ///< parameter updates before this evaluation
    double log_likelihood = 0;
    double objective = 0;    ///< log_likelihood + log_prior (what EM with pseudocounts increases)
    double seconds = 0;      ///< wall time of the iteration: the M-step that made its
                             ///< parameters (none before the first) and its E-step
    double cpu_seconds = 0;  ///< CPU time of the same (every thread of the process)
};

struct FitResult {
    Profile profile;
    double log_likelihood = 0;  ///< of profile on the data
    int iterations = 0;         ///< parameter updates of the chosen run
    bool converged = false;
    int best_restart = 0;
    std::vector<double> restart_log_likelihoods;
    std::vector<IterationRecord> history;  ///< every evaluation of every run
    int64_t known_bases = 0;
    int64_t positions = 0;
    int64_t contigs = 0;
    int64_t windows = 0;  ///< window profiles: windows with evidence (window_has_evidence)
    /// Classes drop_unsupported_classes removed, each with its reason and figures.
    std::vector<std::string> dropped;
    double wall_seconds = 0;  ///< the whole of baum_welch (every restart)
    double cpu_seconds = 0;
};

/// Baum-Welch from start. Logs one line per iteration (restart, iteration, log-likelihood,
/// relative change, seconds). Throws InternalError if log-likelihood + log-prior decreases by
/// more than 1e-9 relative between iterations (that would be a bug), InputError when the data
/// hold no known base.
FitResult baum_welch(const Profile& start, TrainingData& data, const FitOptions& options,
                     const Logger& log);

/// start with free parameters perturbed by the generator seeded with (seed, restart).
Profile perturb(const Profile& start, const FreezeMask& freeze, uint64_t seed, int restart,
                double amount);

/// GC fraction of the sequence a state generates on its own: the stationary composition of its
/// order-k Markov chain (order 0: P(C) + P(G)).
double state_gc(const StateSpec& state);

/// States (with their regions, when each region has exactly one state) sorted by state_gc,
/// ties by position; templates' classes renamed class1..classK. Deterministic.
Profile order_states_by_gc(const Profile& profile, bool rename_classes);

// ---------------------------------------------------------------------------------------------
// Templates and seeding from the data

struct SeedOptions {
    int64_t window = 2000;  ///< bases per window whose GC ranks it
};

/// A K-class template with order-k emissions seeded from data: windows are ranked by GC and
/// split into K equal groups, and class i (in increasing GC) gets the group's order-k
/// frequencies (add-one smoothed). Each class is its own reported region; segments of about
/// `window` bases. Throws InputError when the data hold fewer than K usable windows.
Profile class_template(TrainingData& data, int classes, int order, const SeedOptions& options);

/// Replaces the emissions of profile by data frequencies: states ranked by state_gc get
/// consecutive GC-ranked slices of the windows, each slice as large as the state's share of the
/// stationary distribution of the transitions. Transitions and initial are kept.
Profile seed_from_data(const Profile& profile, TrainingData& data, const SeedOptions& options);

// ---------------------------------------------------------------------------------------------
// Labelled counting

/// Counts on a labelled path: each base's region is the name column of the BED interval that
/// covers it (coordinates on the named sequence, contig.offset respected), default_region
/// elsewhere. Every region needs exactly one state. Transitions between consecutive bases,
/// initial from base 0, emissions of known bases with a full context (others count nowhere).
/// Throws InputError for unknown region names, overlapping labels, labels past a contig's end,
/// or a segment shorter than its region's min_length that the contig end does not cut.
TrainingCounts labelled_counts(const Profile& profile, TrainingData& data,
                               const std::vector<Interval>& labels,
                               const std::string& default_region, const Logger& log);

// ---------------------------------------------------------------------------------------------
// Model selection

/// profile without state s (and its region when no other state has it): the probability of
/// entering s (transitions and initial) goes to s's GC reference (gc.below / gc.above), or to
/// the row's own state when s has none, so that what s explained becomes that class.
Profile without_state(const Profile& profile, int s);

/// After Baum-Welch on a window profile with ordered classes (gc.below / gc.above): removes the
/// ordered classes the genome does not support, one at a time, refitting after each removal.
/// Unsupported: (1) a class whose fitted mean sits on its reference's (the order constraint is
/// active: the genome gave the class no GC direction, so its name would not be true); else
/// (2) the class whose removal lowers BIC = -2 ln L + k ln(n) most (Schwarz 1978, "Estimating
/// the dimension of a model", Ann. Statist. 6:461-464), with k the free parameters and n the
/// windows with evidence, the observations of a window model. Stops when neither applies.
/// Each removal is logged and listed in FitResult::dropped. Profiles without ordered classes
/// are returned unchanged.
FitResult drop_unsupported_classes(FitResult fitted, TrainingData& data, const FitOptions& options,
                                   const Logger& log);

/// One fitted candidate of a selection.
struct Candidate {
    int classes = 0;
    double log_likelihood = 0;
    int64_t parameters = 0;
    double bic = 0;  ///< -2 ln L + parameters * ln(known bases) (Schwarz 1978)
    FitResult fit;
};

/// Fits templates of classes_min..classes_max classes and returns them all; chosen is the
/// index of the lowest BIC (ties: fewer classes).
struct Selection {
    std::vector<Candidate> candidates;
    size_t chosen = 0;
};
Selection select_classes(TrainingData& data, int classes_min, int classes_max, int order,
                         const SeedOptions& seed_options, const FitOptions& options,
                         const Logger& log);

/// The selection table (classes, log-likelihood, parameters, BIC, the chosen row marked).
std::string selection_table(const Selection& selection);

// ---------------------------------------------------------------------------------------------
// The fit job

struct FitJobOptions {
    std::vector<std::string> inputs;            ///< FASTA paths (read once per pass, so not stdin)
    std::vector<std::string> regions;           ///< region strings (faidx)
    std::string regions_bed;                    ///< BED of regions (faidx)
    SoftMasked soft_masked = SoftMasked::base;  ///< lowercase bases: as their base, or unknown
    std::string profile;                        ///< starting profile: built-in or file ("" = none)
    int classes_min = 0;                        ///< template class counts (0 = no template)
    int classes_max = 0;
    int order = 1;                ///< emission order of templates
    std::string select;           ///< "bic" to choose among classes_min..classes_max
    bool init_from_data = false;  ///< reseed the starting profile's emissions from the data
    SeedOptions seed;
    std::string labels;          ///< labelled BED: supervised counting instead of EM
    std::string default_region;  ///< region of unlabelled bases ("" = the only unreported one)
    std::string output = "-";    ///< profile JSON ("" = none: run_fit's result holds it)
    std::string name;            ///< name of the output profile ("" = derived)
    FitOptions fit;
    ShardSpec shard;             ///< with emit_stats: only this shard's records (shard_spec.hpp)
    bool whole_contigs = false;  ///< shards never split a record (no seams step)
    std::string emit_seams;      ///< step 1 for shared records: write only their seams
    std::vector<std::string> seams;  ///< step 2 (with emit_stats): the seams files of every shard
    std::string emit_stats;  ///< write one E-step's counts here instead of fitting ("" = no)
    std::vector<std::string> from_stats;  ///< M-step on the summed counts of these files (no FASTA)
    std::string command_line;             ///< recorded in provenance (without --shard)
};

/// The name of a fitted profile when --name is not given: the starting profile's name with
/// "-fit" appended, once per fit. A distributed fit's M-step (fit --from-stats) may start from
/// the profile of its previous iteration, whose name already ends in "-fit"; with
/// may_continue it keeps such a name, so that every iteration names the result alike.
std::string fitted_profile_name(const std::string& start_name, bool may_continue = false);

/// Parses "K" or "A..B" (1 <= A <= B <= 64). Throws UsageError.
void parse_class_range(const std::string& text, int& lo, int& hi);

/// Throws UsageError naming the conflict.
void validate(const FitJobOptions& options);

/// Runs the whole fit and writes the profile (with provenance) only when everything succeeded.
/// With emit_stats or from_stats, runs emit_statistics or fit_from_statistics instead.
FitResult run_fit(const FitJobOptions& options, const Logger& log);

// ---------------------------------------------------------------------------------------------
// Distributed training: one EM iteration as N independent E-steps and one M-step

/// Checks the options of --emit-stats, --from-stats and --shard. Throws UsageError.
void validate_distributed(const FitJobOptions& options);

/// One E-step of options.profile over the records of options.shard (all records when not
/// sharded), written as tidemark-stats/1 JSON: the shard, the profile used (canonical JSON),
/// the TrainingCounts at full double precision, and the records counted. Records longer than
/// one share are split between shards as scan splits them (unless whole_contigs): with
/// emit_seams, writes only this shard's seams of them (step 1); the E-step (step 2) then needs
/// every shard's seams files (options.seams) and counts only this shard's segments.
FitResult emit_statistics(const FitJobOptions& options, const Logger& log);

/// Sums the counts of every shard's statistics file in shard order and runs the M-step
/// (maximise, as in baum_welch) from the profile the E-steps used; options.profile, when given,
/// is the structure (the starting profile of the whole fit, as baum_welch uses it). Checks that
/// the files come from one E-step (same profile, inputs and shard count; every shard once).
/// Writes the next profile. Throws InputError naming the file.
FitResult fit_from_statistics(const FitJobOptions& options, const Logger& log);

/// Parses one statistics file's counts (exposed for tests). Throws InputError naming `where`.
TrainingCounts counts_from_json(const std::string& json_text, const Profile& profile,
                                const std::string& where);
/// The counts as a JSON object (full precision).
std::string counts_to_json(const TrainingCounts& counts);

}  // namespace tidemark
