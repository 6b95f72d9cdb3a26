// Decoding: exact posterior decoding (checkpointed scaled forward-backward) and Viterbi, both
// streaming per-position results in forward order, block by block, into a sink.
#pragma once

#include <cstdint>
#include <vector>

#include "tidemark/profile.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark {

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
};

struct DecodeResult {
    /// Posterior decoding: natural log of P(contig | profile).
    /// Viterbi: natural log of P(contig, best state path | profile).
    double log_likelihood = 0;
};

/// Receives a contig's blocks in forward order.
class DecodeSink {
public:
    virtual ~DecodeSink() = default;
    virtual void begin_contig(const Contig& /*contig*/) {}
    virtual void block(const BlockView& view) = 0;
    virtual void end_contig(const Contig& /*contig*/, const DecodeResult& /*result*/) {}
};

/// Forwards every call to several sinks, in order.
class SinkFanout final : public DecodeSink {
public:
    explicit SinkFanout(std::vector<DecodeSink*> sinks) : sinks_(std::move(sinks)) {}
    void begin_contig(const Contig& c) override;
    void block(const BlockView& v) override;
    void end_contig(const Contig& c, const DecodeResult& r) override;

private:
    std::vector<DecodeSink*> sinks_;
};

struct DecoderOptions {
    /// Positions per block (checkpoint spacing); 0 = automatic: 64 Ki positions, fewer for
    /// models with many states so that block buffers stay within about 32 MiB.
    int64_t block_size = 0;
};

/// Exact posterior decoding. Memory beyond the 2-bit sequence: 5 block buffers of
/// block_size x S doubles plus one S-vector checkpoint per block (N/block_size x S doubles).
/// Work: about 1.5 x a plain forward-backward (a backward sweep for checkpoints, then a
/// backward recomputation and the forward sweep per block).
/// Scaling: vectors are multiplied by exact powers of two when their sum falls below 2^-64,
/// so log-likelihoods carry no rounding from scaling and no position underflows.
/// Throws InputError naming contig and position if the contig is impossible under the model.
/// One decoder per thread; run() reuses its buffers.
class PosteriorDecoder {
public:
    explicit PosteriorDecoder(const Model& model, DecoderOptions options = {});
    DecodeResult run(const Contig& contig, DecodeSink& sink);

private:
    template <int Fixed>
    DecodeResult run_fixed(const Contig& contig, DecodeSink& sink);

    const Model& model_;
    int64_t block_ = 0;
    std::vector<double> fast_emission_;  ///< emission rows: full contexts, [(ctx * 4 + base) * S
                                         ///< + s], then unknown bases and short contexts
    std::vector<double> folded_;         ///< per emission row r: A[i][j] * e_r[j], S x S (S <= 6)
    std::vector<uint32_t> rows_;         ///< emission row of each position of the current block
    std::vector<uint8_t> bases_;
    std::vector<double> emission_, forward_, backward_, posterior_, checkpoints_, before_;
};

/// Most probable state path (log-space Viterbi; ties go to the lower state index). Memory:
/// one log-score checkpoint per block, one block of back-pointers, and the path as runs.
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
void fill_emissions(const Model& model, const Contig& contig, int64_t begin, int64_t n,
                    uint8_t* bases, double* emission, const std::vector<double>* fast_table = nullptr);

/// The combined table used by fill_emissions for positions with a full context (empty when
/// the table would exceed 32 MiB).
std::vector<double> build_fast_emission_table(const Model& model);

}  // namespace tidemark
