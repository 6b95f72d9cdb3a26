// Training E-step: expected transition, emission and initial counts read off the posterior
// decoder's block views (no second forward-backward recursion).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <memory>

#include "byte_source.hpp"
#include "pipeline.hpp"
#include "thread_pool.hpp"
#include "tidemark/error.hpp"
#include "tidemark/train.hpp"
#include "tidemark/window.hpp"

namespace tidemark {

TrainingCounts TrainingCounts::zero(const Profile& p) {
    TrainingCounts c;
    const size_t P = p.states.size();
    c.initial.assign(P, 0.0);
    c.transitions.assign(P, std::vector<double>(P, 0.0));
    c.chain_steps.assign(P, 0.0);
    for (const auto& s : p.states)
        c.emissions.emplace_back(s.emissions.size(), std::array<double, 4>{});
    return c;
}

void TrainingCounts::add(const TrainingCounts& o) {
    if (o.initial.size() != initial.size() || o.emissions.size() != emissions.size())
        throw InternalError("training counts of different profiles cannot be added");
    for (size_t i = 0; i < initial.size(); ++i) {
        initial[i] += o.initial[i];
        chain_steps[i] += o.chain_steps[i];
        for (size_t j = 0; j < initial.size(); ++j) transitions[i][j] += o.transitions[i][j];
        for (size_t r = 0; r < emissions[i].size(); ++r)
            for (int b = 0; b < 4; ++b) emissions[i][r][b] += o.emissions[i][r][b];
    }
    windows.insert(windows.end(), o.windows.begin(), o.windows.end());
    log_likelihood += o.log_likelihood;
    positions += o.positions;
    known += o.known;
    contigs += o.contigs;
}

namespace {

bool sparse_model(const Model& m) {
    // Same rule as the decoder: the CSR lists pay off when under half the matrix is non-zero.
    return 2 * m.in_from.size() < static_cast<size_t>(m.states) * static_cast<size_t>(m.states);
}

}  // namespace

CountAccumulator::CountAccumulator(const Profile& profile, const Model& model)
    : profile_(profile),
      model_(model),
      sparse_(model.states > 6 && sparse_model(model)),
      counts_(TrainingCounts::zero(profile)) {
    if (model.profile_state.size() != static_cast<size_t>(model.states))
        throw InternalError("CountAccumulator needs a model compiled from its profile");
    const size_t S = static_cast<size_t>(model.states);
    edge_.assign(sparse_ ? model.out_to.size() : S * S, 0.0);
    weight_.assign(S, 0.0);
    pooled_.assign(profile.states.size(), 0.0);
}

void CountAccumulator::begin_contig(const Contig& contig) {
    std::fill(edge_.begin(), edge_.end(), 0.0);
    contig_ = &contig;
    started_ = false;
    ctx_ = RollingContext(model_.max_order);
}

// Adds sum_t f_{t-1}(i) w_t(j) / Z_t per pair (i, j) with w = e * b; A_ij is multiplied in when
// the contig ends, which saves one multiplication per pair and base.
template <int Fixed>
void CountAccumulator::add_transitions(const BlockView& v) {
    const Model& m = model_;
    const int S = Fixed > 0 ? Fixed : v.states;
    const double* A = m.transitions.data();
    double* w = weight_.data();
    // Per-block partial sums keep the long sums accurate; the block's share is added at the end.
    std::vector<double>& part = part_;
    part.assign(edge_.size(), 0.0);
    for (int64_t t = 0; t < v.size; ++t) {
        const int64_t pos = v.begin + t;
        if (pos == 0) continue;
        const double* prev = t == 0 ? v.forward_before : v.forward + (t - 1) * S;
        const double* e = v.emission + t * S;
        const double* b = v.backward + t * S;
        for (int j = 0; j < S; ++j) w[j] = e[j] * b[j];
        if (Fixed > 0 || !sparse_) {
            double z = 0;
            for (int i = 0; i < S; ++i) {
                const double* row = A + static_cast<size_t>(i) * S;
                double acc = 0;
                for (int j = 0; j < S; ++j) acc += row[j] * w[j];
                z += prev[i] * acc;
            }
            if (!(z > 0) || !std::isfinite(z))
                throw InternalError(
                    fmt::format("E-step: transition normaliser {} at position {}", z, pos));
            const double inv = 1.0 / z;
            for (int i = 0; i < S; ++i) {
                const double pi = prev[i] * inv;
                double* out = part.data() + static_cast<size_t>(i) * S;
                for (int j = 0; j < S; ++j) out[j] += pi * w[j];
            }
        } else {
            double z = 0;
            for (int i = 0; i < S; ++i) {
                double acc = 0;
                for (int e2 = m.out_begin[i]; e2 < m.out_begin[i + 1]; ++e2)
                    acc += m.out_prob[e2] * w[m.out_to[e2]];
                z += prev[i] * acc;
            }
            if (!(z > 0) || !std::isfinite(z))
                throw InternalError(
                    fmt::format("E-step: transition normaliser {} at position {}", z, pos));
            const double inv = 1.0 / z;
            for (int i = 0; i < S; ++i) {
                if (prev[i] == 0) continue;
                const double pi = prev[i] * inv;
                for (int e2 = m.out_begin[i]; e2 < m.out_begin[i + 1]; ++e2)
                    part[e2] += pi * w[m.out_to[e2]];
            }
        }
    }
    for (size_t k = 0; k < edge_.size(); ++k) edge_[k] += part[k];
}

void CountAccumulator::add_window_emissions(const BlockView& v) {
    const Model& m = model_;
    const int S = v.states;
    const size_t P = profile_.states.size();
    for (int64_t t = 0; t < v.size; ++t) {
        const double* post = v.posterior + t * S;
        if (v.begin + t == 0)
            for (int s = 0; s < S; ++s) counts_.initial[m.profile_state[s]] += post[s];
        WindowCount w = window_count(m, *contig_, v.begin + t);
        counts_.known += w.known;
        if (!window_has_evidence(m, w)) continue;  // it emitted 1: nothing to learn from it
        WindowTally tally{w.gc, w.known, std::vector<double>(P, 0.0), std::move(w.kmers)};
        for (int s = 0; s < S; ++s) tally.weight[m.profile_state[s]] += post[s];
        counts_.windows.push_back(std::move(tally));
    }
    const int64_t first = v.begin * m.window;
    counts_.positions += std::min(contig_->length, (v.begin + v.size) * m.window) - first;
}

void CountAccumulator::add_emissions(const BlockView& v) {
    const Model& m = model_;
    const int S = v.states;
    const int P = static_cast<int>(profile_.states.size());
    const bool identity = S == P;  // no chains: compiled state s is profile state s
    for (int64_t t = 0; t < v.size; ++t) {
        const uint8_t base = v.bases[t];
        const double* post = v.posterior + t * S;
        if (v.begin + t == 0)
            for (int s = 0; s < S; ++s) counts_.initial[m.profile_state[s]] += post[s];
        if (base == base_unknown) {
            ctx_.push(base);
            continue;
        }
        ++counts_.known;
        const double* g = post;
        if (!identity) {
            std::fill(pooled_.begin(), pooled_.end(), 0.0);
            for (int s = 0; s < S; ++s) pooled_[m.profile_state[s]] += post[s];
            g = pooled_.data();
        }
        for (int p = 0; p < P; ++p) {
            const int k = profile_.states[p].order;
            auto& rows = counts_.emissions[p];
            if (ctx_.complete(k)) {
                rows[ctx_.row(k)][base] += g[p];
            } else if (g[p] > 0) {
                // Latent context, uniform over the rows (that is what the mean row is): each row
                // gets its share of the posterior in proportion to its probability of the base.
                const auto& em = profile_.states[p].emissions;
                double total = 0;
                for (const auto& row : em) total += row[base];
                if (total > 0)
                    for (size_t r = 0; r < em.size(); ++r)
                        rows[r][base] += g[p] * em[r][base] / total;
            }
        }
        ctx_.push(base);
    }
}

void CountAccumulator::block(const BlockView& v) {
    if (!v.forward || !v.backward || !v.emission)
        throw InternalError(
            "CountAccumulator needs the posterior decoder's forward and backward rows");
    if (v.begin > 0 && !v.forward_before)
        throw InternalError("CountAccumulator: block view without forward_before");
    if (!started_) {
        started_ = true;
        // a later segment: the context from the bases before it
        if (v.begin > 0 && contig_) ctx_ = context_before(*contig_, v.begin, model_.max_order);
    }
    switch (v.states) {
        case 1:
            add_transitions<1>(v);
            break;
        case 2:
            add_transitions<2>(v);
            break;
        case 3:
            add_transitions<3>(v);
            break;
        case 4:
            add_transitions<4>(v);
            break;
        case 5:
            add_transitions<5>(v);
            break;
        case 6:
            add_transitions<6>(v);
            break;
        default:
            add_transitions<0>(v);
            break;
    }
    if (v.window > 0) {
        add_window_emissions(v);
        return;
    }
    add_emissions(v);
    counts_.positions += v.size;
}

void CountAccumulator::end_contig(const Contig& contig, const DecodeResult& result) {
    if (contig.length == 0) return;
    end_piece(result, true);
}

void CountAccumulator::end_piece(const DecodeResult& result, bool ends_contig) {
    const Model& m = model_;
    const int S = m.states;
    const auto add = [&](int from, int to, double x) {
        const int ps = m.profile_state[from];
        counts_.transitions[ps][m.profile_state[to]] += x;
        if (m.chain_copy[from] < m.chain_length[from]) counts_.chain_steps[ps] += x;
    };
    if (sparse_) {
        for (int i = 0; i < S; ++i)
            for (int e = m.out_begin[i]; e < m.out_begin[i + 1]; ++e)
                add(i, m.out_to[e], m.out_prob[e] * edge_[e]);
    } else {
        for (int i = 0; i < S; ++i)
            for (int j = 0; j < S; ++j) {
                const double a = m.transitions[static_cast<size_t>(i) * S + j];
                if (a > 0) add(i, j, a * edge_[static_cast<size_t>(i) * S + j]);
            }
    }
    std::fill(edge_.begin(), edge_.end(), 0.0);  // folded in: a join must not add them again
    if (!ends_contig) return;
    counts_.log_likelihood += result.log_likelihood;
    ++counts_.contigs;
}

std::unique_ptr<DecodeSink> CountAccumulator::fork() const {
    return std::make_unique<CountAccumulator>(profile_, model_);
}

void CountAccumulator::join(DecodeSink& later) {
    auto* other = dynamic_cast<CountAccumulator*>(&later);
    if (!other) throw InternalError("CountAccumulator::join: not a fork of a CountAccumulator");
    counts_.add(other->counts_);
    for (size_t k = 0; k < edge_.size(); ++k) edge_[k] += other->edge_[k];
}

namespace {

// A copy of a contig for a worker thread (TrainingData lends each contig only for one call).
void copy_contig(const Contig& from, Contig& to) {
    to.clear();
    to.name = from.name;
    to.offset = from.offset;
    to.sequence_length = from.sequence_length;
    constexpr int64_t piece = int64_t{1} << 20;
    std::vector<uint8_t> codes(
        static_cast<size_t>(std::min(piece, std::max<int64_t>(from.length, 1))));
    for (int64_t pos = 0; pos < from.length; pos += piece) {
        const int64_t n = std::min(piece, from.length - pos);
        from.unpack(pos, n, codes.data());
        to.append(codes.data(), n);
    }
    to.soft_masked = from.soft_masked;
}

// One record's counts: decoded into a fork of the run's accumulator, added in input order.
class CountJob final : public detail::PipelineJob {
public:
    CountJob(std::vector<std::unique_ptr<PosteriorDecoder>>& decoders, CountAccumulator& total)
        : decoders_(decoders), total_(total), acc_(total.fork()) {}
    void decode(int worker, TaskPool* segments) override {
        decoders_[static_cast<size_t>(worker)]->run(contig, *acc_, segments);
    }
    void finish() override { total_.join(*acc_); }
    void restart() { acc_ = total_.fork(); }

private:
    std::vector<std::unique_ptr<PosteriorDecoder>>& decoders_;
    CountAccumulator& total_;
    std::unique_ptr<DecodeSink> acc_;
};

}  // namespace

TrainingCounts expected_counts(const Profile& profile, TrainingData& data, int64_t block_size,
                               int threads) {
    const Model model = compile(profile);
    DecoderOptions options;
    options.block_size = block_size;
    const int T = resolve_threads(threads);
    const detail::DecompressionThreads decompression(T > 1 ? 1 : 0);  // inflate ahead of parsing
    std::vector<std::unique_ptr<PosteriorDecoder>> decoders;
    for (int w = 0; w < T; ++w)
        decoders.push_back(std::make_unique<PosteriorDecoder>(model, options));
    CountAccumulator total(profile, model);
    // This process's pieces of a split record, from every process's seams.
    const auto count_split = [&](const Contig& c, TaskPool* pool) {
        const SplitRecordPart part = data.split_part(c);
        for (const std::pair<size_t, size_t>& piece : part.pieces) {
            auto acc = std::make_unique<CountAccumulator>(profile, model);
            acc->begin_contig(c);
            const DecodeResult result = decoders[0]->run_segments(
                c, part.seams, piece.first, piece.second, *acc,
                [&](size_t, DecodeSink& fork) { acc->join(fork); }, pool);
            acc->end_piece(result, piece.second == part.segments);
            total.join(*acc);
        }
    };
    if (T == 1) {
        // The same per-contig sums as with threads, without copying contigs.
        data.for_each([&](const Contig& c) {
            if (data.current_is_split()) return count_split(c, nullptr);
            const std::unique_ptr<DecodeSink> acc = total.fork();
            decoders[0]->run(c, *acc);
            total.join(*acc);
        });
        return total.counts();
    }
    const auto alone = [&](int64_t length) {
        return decoders[0]->segment_count(length) >= 2 * static_cast<size_t>(T);
    };
    detail::DecodePipeline pipeline(T, alone);
    data.for_each([&](const Contig& c) {
        if (data.current_is_split()) {
            pipeline.drain();
            return count_split(c, pipeline.pool());
        }
        if (alone(c.length)) {  // decoded over the whole pool from the lent contig, not a copy
            pipeline.drain();
            const std::unique_ptr<DecodeSink> acc = total.fork();
            decoders[0]->run(c, *acc, pipeline.pool());
            total.join(*acc);
            return;
        }
        // A finished job's contig storage serves again; its counts are added, so a new fork.
        std::unique_ptr<CountJob> job(static_cast<CountJob*>(pipeline.reuse_finished().release()));
        if (job)
            job->restart();
        else
            job = std::make_unique<CountJob>(decoders, total);
        copy_contig(c, job->contig);
        pipeline.queue(std::move(job));
    });
    pipeline.drain();
    return total.counts();
}

}  // namespace tidemark
