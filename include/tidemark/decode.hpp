// Decoding: exact posterior decoding (checkpointed scaled forward-backward) and Viterbi, both
// streaming per-position results in forward order, block by block, into a sink.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <vector>

#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {

class TaskPool;  // tidemark/thread_pool.hpp

/// One block of consecutive positions handed to a sink. Row t of each matrix is position
/// begin + t; matrices are row-major with `states` columns. Pointers are valid only during
/// the DecodeSink::block call.
struct BlockView {
    int64_t begin = 0;
    int64_t size = 0;
    int states = 0;
    const uint8_t* bases = nullptr;     ///< size base codes 0..4
    const double* posterior = nullptr;  ///< P(state at t | whole contig); rows sum to 1.
                                        ///< Viterbi: 1 for the path's state, 0 elsewhere.
    // Posterior decoding only (nullptr from Viterbi); the training E-step reads these.
    const double* forward = nullptr;   ///< scaled forward vectors (each row has its own scale)
    const double* backward = nullptr;  ///< scaled backward vectors (each row has its own scale)
    const double* emission = nullptr;  ///< emission probability of the base at t in each state
    const double* forward_before = nullptr;  ///< scaled forward at begin-1; nullptr at begin 0
    /// Window models: bases per position (positions are windows, begin and size count windows,
    /// bases[t] is 0 for a window with known bases and base_unknown otherwise); 0 = per base.
    int64_t window = 0;
};

struct DecodeResult {
    /// Posterior decoding: natural log of P(contig | profile).
    /// Viterbi: natural log of P(contig, best state path | profile).
    double log_likelihood = 0;
};

/// Receives a contig's blocks in forward order.
///
/// Parallel runs give each independent span (a later contig) a fork of the sink, decode the
/// spans concurrently, and join the forks back in input order; a sink whose join appends
/// exactly what it would have computed itself makes every output independent of the number of
/// threads.
class DecodeSink {
public:
    virtual ~DecodeSink() = default;
    virtual void begin_contig(const Contig& /*contig*/) {}
    virtual void block(const BlockView& view) = 0;
    virtual void end_contig(const Contig& /*contig*/, const DecodeResult& /*result*/) {}
    /// A fresh sink with this one's settings for a later, independent span; nullptr when the
    /// sink cannot be forked.
    virtual std::unique_ptr<DecodeSink> fork() const { return nullptr; }
    /// Appends the results of `later` (a fork of this sink that saw the following span).
    virtual void join(DecodeSink& /*later*/) {}
};

/// Forwards every call to several sinks, in order. Forkable when all of them are: the fork
/// owns the sinks' forks, and join joins them one by one.
class SinkFanout final : public DecodeSink {
public:
    explicit SinkFanout(std::vector<DecodeSink*> sinks) : sinks_(std::move(sinks)) {}
    void begin_contig(const Contig& c) override;
    void block(const BlockView& v) override;
    void end_contig(const Contig& c, const DecodeResult& r) override;
    std::unique_ptr<DecodeSink> fork() const override;
    void join(DecodeSink& later) override;
    /// The i-th sink (of a fork: the fork of the i-th sink given to the original).
    DecodeSink& part(size_t i) const { return *sinks_.at(i); }

private:
    std::vector<DecodeSink*> sinks_;
    std::vector<std::unique_ptr<DecodeSink>> owned_;
};

/// One segment's share of the boundary vectors of a long contig (step (a) of PosteriorDecoder):
/// the product of its forward operators, whose true value is product * 2^exponent. Processes
/// that decode different segments of one contig (scan --shard) exchange these, so that each
/// computes exactly the boundary vectors of a single run.
struct SegmentSeam {
    int64_t begin = 0, end = 0;   ///< the segment [begin, end) of the contig
    std::vector<double> product;  ///< segment 0: the row vector (pi e_0) M_0 (S values);
                                  ///< later ones: F_begin M_begin (S x S, row-major)
    int64_t exponent = 0;
    /// Per block of the segment, the S x S matrix at its last position (what the forward sweep
    /// needs); given back to run_segments, they spare the segment's matrix sweep.
    std::vector<double> marks;
    /// CRC-32 of the segment's base codes and the max_order bases before it: run_segments
    /// checks it before trusting the marks.
    uint32_t bases_crc32 = 0;
};

struct DecoderOptions {
    /// Positions per block (checkpoint spacing); 0 = automatic: 64 Ki positions, fewer for
    /// models with many states so that block buffers stay within about 32 MiB.
    int64_t block_size = 0;
    /// Positions per segment of a long contig (see PosteriorDecoder); 0 = 16 blocks but at
    /// least 64 Ki, rounded up to a multiple of segment_multiple; -1 = never split.
    int64_t segment_size = 0;
    /// Segment boundaries fall on multiples of this (e.g. the track bin, so no bin straddles one).
    int64_t segment_multiple = 1;
};

/// Exact posterior decoding. Memory beyond the 2-bit sequence: 5 block buffers of
/// block_size x S doubles plus one S-vector checkpoint per block (N/block_size x S doubles).
/// Work: about 1.5 x a plain forward-backward (a backward sweep for checkpoints, then a
/// backward recomputation and the forward sweep per block).
/// Scaling: vectors are multiplied by exact powers of two when their sum falls below 2^-64,
/// so log-likelihoods carry no rounding from scaling and no position underflows.
/// Throws InputError naming contig and position if the contig is impossible under the model.
/// One decoder per thread; run() reuses its buffers.
///
/// Long contigs (more than one segment) of models with up to 6 states, decoded into a forkable
/// sink, are split into segments of a fixed length, decoded exactly and independently:
/// (a) per segment, a backward sweep of S x S matrices from the identity at the segment's end
/// (B_t = A diag(e_{t+1}) B_{t+1}, rescaled by powers of two), keeping the matrix at every block
/// end; (b) a short sequential chaining of the boundary vectors (backward from the contig end,
/// forward from the initial distribution); (c) per segment, the forward sweep with backward
/// recomputation from the checkpoint vectors (block matrix times the segment's end vector),
/// into a fork of the sink; (d) the forks are joined in order. The split depends only on the
/// contig length and the options, never on the number of threads, so results are the same
/// with or without a pool. Models with more states decode in one segment (the matrix sweep
/// would cost S times a vector sweep).
class PosteriorDecoder {
public:
    explicit PosteriorDecoder(const Model& model, DecoderOptions options = {});
    ~PosteriorDecoder();
    /// Step (a) of a long record's segments started while the record is still being read
    /// (sweep_early), so that reading a chromosome does not leave the pool idle; run() takes
    /// them over once the record is read whole. Waits for its tasks when destroyed.
    class EarlySweeps {
    public:
        EarlySweeps();
        ~EarlySweeps();
        EarlySweeps(const EarlySweeps&) = delete;
        EarlySweeps& operator=(const EarlySweeps&) = delete;
        /// Waits for the tasks and forgets them (the record is not decoded after all).
        void reset();
        /// Segments started (0 once run() has taken them).
        size_t started() const;

    private:
        friend class PosteriorDecoder;
        struct State;
        std::unique_ptr<State> state_;
    };

    /// pool: runs the segments of a long contig in parallel (nullptr = on this thread). The
    /// pool's workers must be idle (not waiting on this call), or running only `early`'s
    /// sweeps. early: the sweeps sweep_early started for this contig while it was read (they
    /// give bit for bit what run() would compute); run() waits for them and empties it.
    DecodeResult run(const Contig& contig, DecodeSink& sink, TaskPool* pool = nullptr,
                     EarlySweeps* early = nullptr);
    /// Starts on `pool` step (a) of each segment of `reading` that is now read whole and not
    /// yet in `early`, on a shared prefix of its bases (Contig::shared_prefix). `reading` is a
    /// record still being appended to; nothing is started unless its length already splits().
    /// The pool must run no other work of this decoder until run() takes `early`.
    void sweep_early(const Contig& reading, TaskPool& pool, EarlySweeps& early);
    /// True when a contig of this length is decoded in segments (given a forkable sink).
    bool splits(int64_t length) const;
    /// Segment length of long contigs; 0 = this model is never split.
    int64_t segment_length() const { return segment_; }
    /// Segments of a contig of this length (1 when it is not split).
    size_t segment_count(int64_t length) const;

    /// Step (a) alone for segments [first, last) of a contig that splits(): their seams, with
    /// marks and base CRCs.
    std::vector<SegmentSeam> seams(const Contig& contig, size_t first, size_t last,
                                   TaskPool* pool = nullptr);

    /// Receives each decoded segment's fork, in segment order.
    using SegmentTaker = std::function<void(size_t segment, DecodeSink& fork)>;
    /// Decodes segments [first, last) of a contig that splits(), given the seams of all its
    /// segments (from seams(), here or in other processes): steps (a) for [first, last) unless
    /// their marks are given, (b) and (c), each segment into its own fork of `sink`, handed to
    /// `take`. The caller begins and ends `sink`. Given marks need the segment's bases to match
    /// their CRC; without marks, the recomputed seams must equal the given ones bit for bit
    /// (InputError otherwise: they come from another input, profile or options). Returns the
    /// whole contig's log-likelihood when `last` is the final segment, NaN otherwise. The
    /// posteriors are those of run(), bit for bit.
    DecodeResult run_segments(const Contig& contig, const std::vector<SegmentSeam>& all,
                              size_t first, size_t last, DecodeSink& sink, const SegmentTaker& take,
                              TaskPool* pool = nullptr);

private:
    struct Workspace;
    struct Segment;
    template <int Fixed>
    DecodeResult run_fixed(const Contig& contig, DecodeSink& sink);
    template <int Fixed>
    DecodeResult run_segmented(const Contig& contig, DecodeSink& sink, TaskPool* pool,
                               EarlySweeps* early);
    std::vector<Segment> make_segments(int64_t length) const;
    uint32_t bases_crc32(const Contig& contig, int64_t begin, int64_t end) const;
    void make_workspaces(TaskPool* pool);    ///< one workspace per pool worker
    Workspace& sized_workspace(int worker);  ///< that worker's, sized for a block
    void for_segments(size_t first, size_t last, TaskPool* pool,
                      const std::function<void(size_t, Workspace&)>& task);
    template <int Fixed>
    void matrix_sweep(const Contig& contig, Segment& segment, Workspace& ws) const;
    template <int Fixed>
    void matrix_sweeps(const Contig& contig, std::vector<Segment>& segs, size_t first, size_t last,
                       TaskPool* pool);
    void take_early(EarlySweeps& early, std::vector<Segment>& segs) const;
    template <int Fixed>
    DecodeResult sweep_segments(const Contig& contig, std::vector<Segment>& segs, size_t first,
                                size_t last, DecodeSink& sink, const SegmentTaker& take,
                                TaskPool* pool);

    const Model& model_;
    int64_t block_ = 0;
    int64_t segment_ = 0;                                 ///< segment length; 0 = never split
    std::vector<std::unique_ptr<Workspace>> workspaces_;  ///< one per pool worker
    std::vector<double> fast_emission_;   ///< emission rows: full contexts, [(ctx * 4 + base) * S
                                          ///< + s], then unknown bases and short contexts
    std::vector<double> folded_;          ///< per emission row r: A[i][j] * e_r[j], S x S (S <= 6)
    std::vector<double> folded_columns_;  ///< folded_ with each matrix transposed
    std::vector<uint32_t> rows_;          ///< emission row of each position of the current block
    std::vector<uint8_t> bases_;
    std::vector<double> emission_, forward_, backward_, posterior_, checkpoints_, before_;
};

/// Most probable state path (log-space Viterbi; ties go to the lower state index). Memory:
/// one log-score checkpoint per block, one block of back-pointers, and the path as runs.
/// Sequential; sparse models (duration chains) use the incoming-transition lists, so a chain
/// costs time linear in its length.
class ViterbiDecoder {
public:
    explicit ViterbiDecoder(const Model& model, DecoderOptions options = {});
    DecodeResult run(const Contig& contig, DecodeSink& sink);

private:
    const Model& model_;
    int64_t block_ = 0;
    std::vector<double> fast_emission_;
};

/// Emission probabilities of bases [begin, begin+n) in every state (row-major n x S) and the
/// base codes; the contexts look back before begin as needed. Exposed for tests and training.
/// Window models: positions are windows, rows are scaled (fill_window_emissions) and the return
/// value is the natural log of the factors divided out; 0 for per-base models.
double fill_emissions(const Model& model, const Contig& contig, int64_t begin, int64_t n,
                      uint8_t* bases, double* emission,
                      const std::vector<double>* fast_table = nullptr);

/// The combined table used by fill_emissions for positions with a full context (empty when
/// the table would exceed 32 MiB).
std::vector<double> build_fast_emission_table(const Model& model);

}  // namespace tidemark
