// Segmented decoding of long contigs (see decode.hpp): matrix sweeps per segment, a sequential
// chaining of boundary vectors, then independent forward sweeps per segment into sink forks.
#include <zlib.h>

#include <deque>
#include <functional>
#include <future>
#include <limits>

#include "decode_internal.hpp"
#include "thread_pool.hpp"

namespace tidemark {

using namespace detail;

PosteriorDecoder::~PosteriorDecoder() = default;

// What the matrix sweep and the chaining know about one segment [begin, end).
struct PosteriorDecoder::Segment {
    int64_t begin = 0, end = 0;
    std::vector<double> marks;       ///< per block: the S x S matrix at the block's last position
    std::vector<double> product;     ///< F_begin M_begin (segment 0: the row (pi * e_0) M_0)
    int64_t product_exponent = 0;    ///< product's true value is product * 2^exponent
    std::vector<double> end_vector;  ///< scaled backward vector at end - 1
    std::vector<double> before;      ///< scaled forward vector at begin - 1 (segments > 0)
    int64_t before_exponent = 0;
    double last_sum = 0;  ///< the forward sweep's last sum and exponent
    int64_t exponent = 0;
};

namespace {

// M = F_row M for each row in turn, the k-th row being row_at(k) for k < count (the matrix
// sweep's step); returns the exponent removed by rescaling. M is row-major S x S; its columns
// are independent vector recursions, so a step costs about as much time as one vector step of
// the sequential sweep. Sets failed = k when the k-th step makes the matrix all zero (the
// contig is impossible). The matrix rows are S-vectors (KernelVector): row i of the product is
// sum_j F_ij W_j, summed in j order as the scalar loop summed each entry.
template <int S, bool Avx2, typename RowAt>
[[gnu::always_inline]] inline int64_t matrix_steps(const double* folded, int64_t count,
                                                   RowAt row_at, double* M, int64_t& failed) {
    using V = KernelVector<S, Avx2>;
    constexpr size_t SS = static_cast<size_t>(S) * S;
    V W[S];
    for (int i = 0; i < S; ++i) load_lanes<S>(M + i * S, W[i]);
    int64_t exponent = 0;
    for (int64_t k = 0; k < count; ++k) {
        const double* F = folded + row_at(k) * SS;
        V T[S];
        for (int i = 0; i < S; ++i) {
            T[i] = F[i * S] * W[0];
            for (int j = 1; j < S; ++j) T[i] += F[i * S + j] * W[j];
        }
        // Rescaling is decided on the sum of the S x S entries in row-major order, a chain of
        // S * S - 1 dependent additions (a fifth of the step's time at S = 4), formed unless
        // surely_at_least settles it.
        bool large = surely_at_least<S>(T[0], rescale_below);
        for (int i = 1; i < S; ++i) large |= surely_at_least<S>(T[i], rescale_below);
        if (!large) {
            double entries[SS];
            for (int i = 0; i < S; ++i) store_lanes<S>(T[i], entries + i * S);
            double s = entries[0];
            for (size_t q = 1; q < SS; ++q) s += entries[q];
            if (!(s > 0)) {
                failed = k;
                break;
            }
            if (s < rescale_below) {
                const int e = exponent_of(s);
                const double f = pow2(-e);
                for (int i = 0; i < S; ++i) T[i] *= f;
                exponent += e;
            }
        }
        for (int i = 0; i < S; ++i) W[i] = T[i];
    }
    for (int i = 0; i < S; ++i) store_lanes<S>(W[i], M + i * S);
    return exponent;
}

// One step with one row.
template <int S>
inline int64_t matrix_step(const double* folded, uint32_t row, double* M, int64_t& failed) {
    return matrix_steps<S, false>(
        folded, 1, [row](int64_t) { return row; }, M, failed);
}

// The steps of one block: M_t = F_{rows[t+1]} M_{t+1} for t = n-2 down to 0. On failure,
// failed = the position (in the block) whose row made the matrix zero. The bulk of the matrix
// sweep, so compiled also for AVX2 (use_avx2_kernels).
template <int S, bool Avx2>
[[gnu::always_inline]] inline int64_t matrix_steps_back_body(const double* folded,
                                                             const uint32_t* rows, int64_t n,
                                                             double* M, int64_t& failed) {
    const int64_t exponent = matrix_steps<S, Avx2>(
        folded, n - 1,
        [ rows, n ](int64_t k) __attribute__((always_inline)) { return rows[n - 1 - k]; }, M,
        failed);
    if (failed >= 0) failed = n - 1 - failed;
    return exponent;
}

template <int S>
[[gnu::noinline]] int64_t matrix_steps_back_portable(const double* folded, const uint32_t* rows,
                                                     int64_t n, double* M, int64_t& failed) {
    return matrix_steps_back_body<S, false>(folded, rows, n, M, failed);
}
#if TIDEMARK_AVX2_KERNELS
template <int S>
[[gnu::noinline, gnu::target("avx2")]] int64_t matrix_steps_back_avx2(const double* folded,
                                                                      const uint32_t* rows,
                                                                      int64_t n, double* M,
                                                                      int64_t& failed) {
    return matrix_steps_back_body<S, true>(folded, rows, n, M, failed);
}
#endif

template <int S>
int64_t matrix_steps_back(const double* folded, const uint32_t* rows, int64_t n, double* M,
                          int64_t& failed) {
#if TIDEMARK_AVX2_KERNELS
    if (use_avx2_kernels()) return matrix_steps_back_avx2<S>(folded, rows, n, M, failed);
#endif
    return matrix_steps_back_portable<S>(folded, rows, n, M, failed);
}

}  // namespace

bool PosteriorDecoder::splits(int64_t length) const {
    return segment_ > 0 && length > segment_;
}

// The segments of a contig of length N: [k * segment, min(N, (k + 1) * segment)).
std::vector<PosteriorDecoder::Segment> PosteriorDecoder::make_segments(int64_t N) const {
    std::vector<Segment> segs(segment_count(N));
    for (size_t k = 0; k < segs.size(); ++k) {
        segs[k].begin = static_cast<int64_t>(k) * segment_;
        segs[k].end = std::min(N, segs[k].begin + segment_);
    }
    return segs;
}

size_t PosteriorDecoder::segment_count(int64_t length) const {
    return splits(length) ? static_cast<size_t>((length + segment_ - 1) / segment_) : 1;
}

void PosteriorDecoder::make_workspaces(TaskPool* pool) {
    const int workers = pool ? pool->threads() : 1;
    while (static_cast<int>(workspaces_.size()) < workers)
        workspaces_.push_back(std::make_unique<Workspace>());
}

PosteriorDecoder::Workspace& PosteriorDecoder::sized_workspace(int worker) {
    // Sized by the worker that uses it, not up front: a chromosome's first segments then do not
    // wait for the zeroing of every worker's buffers (2 % of a 2-thread scan of chrX).
    Workspace& w = *workspaces_[static_cast<size_t>(worker)];
    w.size(std::min(block_, segment_), model_.states);
    return w;
}

// Runs task(k, workspace) for k in [first, last), in parallel when there is a pool; waits for
// all of them, then rethrows the first failure in segment order.
void PosteriorDecoder::for_segments(size_t first, size_t last, TaskPool* pool,
                                    const std::function<void(size_t, Workspace&)>& task) {
    make_workspaces(pool);
    if (!pool) {
        for (size_t k = first; k < last; ++k) task(k, sized_workspace(0));
        return;
    }
    std::vector<std::future<void>> done;
    for (size_t k = first; k < last; ++k)
        done.push_back(pool->submit([&, k](int w) { task(k, sized_workspace(w)); }));
    for (auto& f : done) f.wait();
    for (auto& f : done) f.get();
}

// (a) The matrix sweep of one segment: M = I at the segment's last position,
// M_t = F_{t+1} M_{t+1}; the matrix at every block end, and the segment's product.
template <int Fixed>
void PosteriorDecoder::matrix_sweep(const Contig& contig, Segment& sg, Workspace& ws) const {
    constexpr int S = Fixed;
    constexpr int SS = S * S;
    const Model& m = model_;
    const int64_t B = std::min(block_, segment_);
    const TableLayout layout(m.max_order);
    const double* table = fast_emission_.data();
    const double* folded = folded_.data();
    const int64_t n_seg = sg.end - sg.begin;
    const int64_t nb = (n_seg + B - 1) / B;
    sg.marks.assign(static_cast<size_t>(nb) * SS, 0.0);
    double M[SS];
    int64_t mexp = 0;
    uint32_t next_row = 0;
    for (int64_t j = nb - 1; j >= 0; --j) {
        const int64_t start = sg.begin + j * B;
        const int64_t n = std::min(B, sg.end - start);
        fill_rows_of(m, contig, layout, start, n, ws.bases.data(), ws.rows.data());
        const uint32_t* rows = ws.rows.data();
        if (j == nb - 1) {
            for (int q = 0; q < SS; ++q) M[q] = 0.0;
            for (int i = 0; i < S; ++i) M[i * S + i] = 1.0;
        } else {
            int64_t failed = -1;
            mexp += matrix_step<S>(folded, next_row, M, failed);
            if (failed >= 0) impossible(m, contig, start + n);
        }
        std::copy(M, M + SS, sg.marks.begin() + j * SS);
        if (n >= 2) {
            int64_t failed = -1;
            // rows[n-1], ..., rows[1]: the steps to positions n-2, ..., 0
            mexp += matrix_steps_back<S>(folded, rows, n, M, failed);
            if (failed >= 0) impossible(m, contig, start + failed);
        }
        next_row = rows[0];
    }
    const auto step = [&](uint32_t row, int64_t pos) {
        int64_t failed = -1;
        mexp += matrix_step<S>(folded, row, M, failed);
        if (failed >= 0) impossible(m, contig, pos);
    };
    if (sg.begin == 0) {  // the row vector (pi * e_0) M_0
        const double* e = table + static_cast<size_t>(next_row) * S;
        sg.product.assign(S, 0.0);
        for (int c = 0; c < S; ++c) {
            double acc = m.initial[0] * e[0] * M[c];
            for (int i = 1; i < S; ++i) acc += m.initial[i] * e[i] * M[i * S + c];
            sg.product[c] = acc;
        }
        sg.product_exponent = mexp;
    } else {  // F_begin M_begin
        step(next_row, sg.begin);
        sg.product.assign(M, M + SS);
        sg.product_exponent = mexp;
    }
}

// The early sweeps of one record: segment k is segments[k], done[k] its task.
struct PosteriorDecoder::EarlySweeps::State {
    const PosteriorDecoder* decoder = nullptr;
    std::deque<Segment> segments;  // a deque: tasks hold references to earlier ones while it grows
    std::vector<std::future<void>> done;
    State() = default;
    State(const State&) = delete;
    State& operator=(const State&) = delete;
    ~State() {
        for (auto& f : done)
            if (f.valid()) f.wait();  // the tasks write segments
    }
};

PosteriorDecoder::EarlySweeps::EarlySweeps() = default;
PosteriorDecoder::EarlySweeps::~EarlySweeps() = default;
void PosteriorDecoder::EarlySweeps::reset() {
    state_.reset();
}
size_t PosteriorDecoder::EarlySweeps::started() const {
    return state_ ? state_->segments.size() : 0;
}

void PosteriorDecoder::sweep_early(const Contig& reading, TaskPool& pool, EarlySweeps& early) {
    if (model_.window > 0 || model_.states > max_fixed_states || !splits(reading.length)) return;
    if (!early.state_) {
        early.state_ = std::make_unique<EarlySweeps::State>();
        early.state_->decoder = this;
        make_workspaces(&pool);
    }
    EarlySweeps::State& st = *early.state_;
    if (st.decoder != this) throw InternalError("decoder: early sweeps of another decoder");
    // Segments in the bases whose bytes appending never writes again (shared_prefix).
    const auto ready = static_cast<size_t>((reading.length & ~int64_t{3}) / segment_);
    if (ready <= st.segments.size()) return;
    auto prefix = std::make_shared<const Contig>(
        reading.shared_prefix(static_cast<int64_t>(ready) * segment_));
    st.done.reserve(ready);  // push_back below cannot throw once a task is running
    for (size_t k = st.segments.size(); k < ready; ++k) {
        Segment& sg = st.segments.emplace_back();
        sg.begin = static_cast<int64_t>(k) * segment_;
        sg.end = sg.begin + segment_;
        try {
            st.done.push_back(pool.submit([this, prefix, &sg](int worker) {
                with_fixed_states(model_.states, [&](auto fixed) {
                    matrix_sweep<decltype(fixed)::value>(*prefix, sg, sized_workspace(worker));
                });
            }));
        } catch (...) {              // submit failed: no task holds sg
            st.segments.pop_back();  // one task per segment, as take_early expects
            throw;
        }
    }
}

// Moves the early sweeps into segs once they are done; rethrows the first failure in segment
// order (they precede every other segment, so it is the failure a run without them meets first).
void PosteriorDecoder::take_early(EarlySweeps& early, std::vector<Segment>& segs) const {
    const std::unique_ptr<EarlySweeps::State> st = std::move(early.state_);
    if (!st) return;
    for (auto& f : st->done) f.wait();
    if (st->decoder != this || st->segments.size() > segs.size())
        throw InternalError("decoder: early sweeps of another decoder or record");
    for (size_t k = 0; k < st->segments.size(); ++k) {
        st->done[k].get();
        Segment& sg = st->segments[k];
        if (sg.begin != segs[k].begin || sg.end != segs[k].end)
            throw InternalError("decoder: early sweeps of another record");
        segs[k] = std::move(sg);
    }
}

template <int Fixed>
void PosteriorDecoder::matrix_sweeps(const Contig& contig, std::vector<Segment>& segs, size_t first,
                                     size_t last, TaskPool* pool) {
    for_segments(first, last, pool, [&](size_t k, Workspace& ws) {
        // Segments with marks are done: given (run_segments) or swept early (take_early).
        if (segs[k].marks.empty()) matrix_sweep<Fixed>(contig, segs[k], ws);
    });
}

template <int Fixed>
DecodeResult PosteriorDecoder::sweep_segments(const Contig& contig, std::vector<Segment>& segs,
                                              size_t first, size_t last, DecodeSink& sink,
                                              const SegmentTaker& take, TaskPool* pool) {
    constexpr int S = Fixed;
    constexpr int SS = S * S;
    const Model& m = model_;
    const int64_t B = std::min(block_, segment_);
    const TableLayout layout(m.max_order);
    const double* table = fast_emission_.data();
    const double* folded = folded_.data();
    const int workers = pool ? pool->threads() : 1;
    make_workspaces(pool);
    // (b) Chaining: backward vectors at segment ends from the contig end, forward vectors before
    // segment starts from the initial distribution.
    const size_t K = segs.size();
    segs[K - 1].end_vector.assign(S, 1.0);
    for (size_t k = K - 1; k-- > 0;) {
        const std::vector<double>& P = segs[k + 1].product;
        const std::vector<double>& b = segs[k + 1].end_vector;
        std::vector<double> v(S);
        double s = 0;
        for (int i = 0; i < S; ++i) {
            double acc = P[i * S] * b[0];
            for (int c = 1; c < S; ++c) acc += P[i * S + c] * b[c];
            v[i] = acc;
            s += acc;
        }
        if (!(s > 0)) impossible(m, contig, segs[k + 1].begin);
        if (s < rescale_below) rescale(v.data(), S, s);
        segs[k].end_vector = std::move(v);
    }
    {
        std::vector<double> a = segs[0].product;
        int64_t aexp = segs[0].product_exponent;
        for (size_t k = 1; k < K; ++k) {
            if (k > 1) {
                const std::vector<double>& P = segs[k - 1].product;
                std::vector<double> v(S);
                for (int c = 0; c < S; ++c) {
                    double acc = a[0] * P[c];
                    for (int i = 1; i < S; ++i) acc += a[i] * P[i * S + c];
                    v[c] = acc;
                }
                a = std::move(v);
                aexp += segs[k - 1].product_exponent;
            }
            const double s = sum_of(a.data(), S);
            if (!(s > 0)) impossible(m, contig, segs[k].begin - 1);
            if (s < rescale_below) aexp += rescale(a.data(), S, s);
            segs[k].before = a;
            segs[k].before_exponent = aexp;
        }
    }

    // (c) Forward sweep per segment with backward recomputation inside each block, into a fork.
    const auto sweep = [&](size_t k, Workspace& ws, DecodeSink& out) {
        Segment& sg = segs[k];
        const int64_t nb = (sg.end - sg.begin + B - 1) / B;
        std::array<double, S> fp{}, before{};
        int64_t exponent = sg.before_exponent;
        double last_sum = 0;
        if (k > 0) std::copy(sg.before.begin(), sg.before.end(), fp.begin());
        for (int64_t j = 0; j < nb; ++j) {
            const int64_t start = sg.begin + j * B;
            const int64_t n = std::min(B, sg.end - start);
            fill_rows_of(m, contig, layout, start, n, ws.bases.data(), ws.rows.data());
            const uint32_t* rows = ws.rows.data();
            double* em = ws.emission.data();
            for (int64_t t = 0; t < n; ++t) {
                const double* src = table + static_cast<size_t>(rows[t]) * S;
                for (int s2 = 0; s2 < S; ++s2) em[t * S + s2] = src[s2];
            }
            double* bw = ws.backward.data();
            double* fw = ws.forward.data();
            {  // checkpoint: the block-end matrix times the segment's end vector
                const double* Mj = sg.marks.data() + j * SS;
                const double* e = sg.end_vector.data();
                double* c = bw + (n - 1) * S;
                for (int i = 0; i < S; ++i) {
                    double acc = Mj[i * S] * e[0];
                    for (int c2 = 1; c2 < S; ++c2) acc += Mj[i * S + c2] * e[c2];
                    c[i] = acc;
                }
                const double s = sum_of(c, S);
                if (!(s > 0)) impossible(m, contig, start + n - 1);
                if (s < rescale_below) rescale(c, S, s);
            }
            copy_vec(fp.data(), S, before.data());
            sweep_block<Fixed>({m, contig, nullptr, false, folded, folded_columns_.data(), start, n,
                                rows, em, fw, bw, ws.posterior.data(), fp.data(), exponent,
                                last_sum});
            BlockView view;
            view.begin = start;
            view.size = n;
            view.states = S;
            view.bases = ws.bases.data();
            view.posterior = ws.posterior.data();
            view.forward = fw;
            view.backward = bw;
            view.emission = em;
            view.forward_before = start == 0 ? nullptr : before.data();
            out.block(view);
        }
        sg.last_sum = last_sum;
        sg.exponent = exponent;
    };
    // At most workers + 1 forks hold results at once; they are joined in order.
    struct Pending {
        size_t segment = 0;
        std::unique_ptr<DecodeSink> fork;
        std::future<void> done;
    };
    std::deque<Pending> window;
    const auto wait_all = [&] {
        for (auto& p : window)
            if (p.done.valid()) p.done.wait();
    };
    try {
        for (size_t k = first; k < last; ++k) {
            while (window.size() > static_cast<size_t>(workers)) {
                window.front().done.get();
                take(window.front().segment, *window.front().fork);
                window.pop_front();
            }
            Pending p;
            p.segment = k;
            p.fork = sink.fork();
            if (!p.fork) throw InternalError("decoder: a sink stopped being forkable");
            p.fork->begin_contig(contig);
            DecodeSink* out = p.fork.get();
            if (pool) {
                p.done = pool->submit([&, k, out](int w) { sweep(k, sized_workspace(w), *out); });
            } else {
                std::promise<void> ready;
                sweep(k, sized_workspace(0), *out);
                ready.set_value();
                p.done = ready.get_future();
            }
            window.push_back(std::move(p));
        }
        while (!window.empty()) {
            window.front().done.get();
            take(window.front().segment, *window.front().fork);
            window.pop_front();
        }
    } catch (...) {
        wait_all();  // tasks still running use this frame's data
        throw;
    }
    DecodeResult result;
    result.log_likelihood = std::numeric_limits<double>::quiet_NaN();
    if (last == K) {
        const Segment& final_segment = segs[K - 1];
        result.log_likelihood =
            std::log(final_segment.last_sum) + static_cast<double>(final_segment.exponent) * ln2;
    }
    return result;
}

template <int Fixed>
DecodeResult PosteriorDecoder::run_segmented(const Contig& contig, DecodeSink& sink, TaskPool* pool,
                                             EarlySweeps* early) {
    static_assert(Fixed > 0, "segmented decoding needs a compile-time state count");
    if (fast_emission_.empty() || folded_.empty())
        throw InternalError("decoder: emission table missing for a small model");
    sink.begin_contig(contig);
    std::vector<Segment> segs = make_segments(contig.length);
    if (early) take_early(*early, segs);
    matrix_sweeps<Fixed>(contig, segs, 0, segs.size(), pool);
    const DecodeResult result = sweep_segments<Fixed>(
        contig, segs, 0, segs.size(), sink, [&](size_t, DecodeSink& fork) { sink.join(fork); },
        pool);
    sink.end_contig(contig, result);
    return result;
}

std::vector<SegmentSeam> PosteriorDecoder::seams(const Contig& contig, size_t first, size_t last,
                                                 TaskPool* pool) {
    std::vector<Segment> segs = make_segments(contig.length);
    if (!splits(contig.length) || first > last || last > segs.size())
        throw InternalError("PosteriorDecoder::seams: not a split contig or a bad segment range");
    with_fixed_states(model_.states, [&](auto fixed) {
        matrix_sweeps<decltype(fixed)::value>(contig, segs, first, last, pool);
    });
    std::vector<SegmentSeam> out;
    for (size_t k = first; k < last; ++k)
        out.push_back({segs[k].begin, segs[k].end, std::move(segs[k].product),
                       segs[k].product_exponent, std::move(segs[k].marks),
                       bases_crc32(contig, segs[k].begin, segs[k].end)});
    return out;
}

uint32_t PosteriorDecoder::bases_crc32(const Contig& contig, int64_t begin, int64_t end) const {
    uLong crc = crc32(0L, Z_NULL, 0);
    std::vector<uint8_t> codes;
    constexpr int64_t piece = int64_t{1} << 20;
    for (int64_t at = std::max<int64_t>(0, begin - model_.max_order); at < end; at += piece) {
        const int64_t n = std::min(piece, end - at);
        codes.resize(static_cast<size_t>(n));
        contig.unpack(at, n, codes.data());
        crc = crc32(crc, codes.data(), static_cast<uInt>(n));
    }
    return static_cast<uint32_t>(crc);
}

DecodeResult PosteriorDecoder::run_segments(const Contig& contig,
                                            const std::vector<SegmentSeam>& all, size_t first,
                                            size_t last, DecodeSink& sink, const SegmentTaker& take,
                                            TaskPool* pool) {
    std::vector<Segment> segs = make_segments(contig.length);
    if (!splits(contig.length) || first >= last || last > segs.size())
        throw InternalError(
            "PosteriorDecoder::run_segments: not a split contig or a bad segment range");
    if (all.size() != segs.size())
        throw InputError(
            fmt::format("record '{}': the seams given have {} segments, the record has {}; they "
                        "come from another input or other options",
                        contig.name, all.size(), segs.size()));
    const size_t S = static_cast<size_t>(model_.states);
    const int64_t B = std::min(block_, segment_);
    const auto mismatch = [&](size_t k) {
        return InputError(
            fmt::format("record '{}', segment {} ({}-{}): the seams given do not match this "
                        "sequence; they come from another "
                        "input, profile or --block/--bin",
                        contig.name, k + 1, segs[k].begin, segs[k].end));
    };
    // This process's segments with marks from step 1 skip their matrix sweep, once their bases
    // are those the marks were made from.
    std::vector<bool> given_marks(segs.size(), false);
    for (size_t k = first; k < last; ++k) {
        const SegmentSeam& given = all[k];
        if (given.marks.empty()) continue;
        const auto blocks = static_cast<size_t>((segs[k].end - segs[k].begin + B - 1) / B);
        if (given.marks.size() != blocks * S * S ||
            given.bases_crc32 != bases_crc32(contig, segs[k].begin, segs[k].end))
            throw mismatch(k);
        segs[k].marks = given.marks;
        segs[k].product = given.product;
        segs[k].product_exponent = given.exponent;
        given_marks[k] = true;
    }
    return with_fixed_states(model_.states, [&](auto fixed) {
        matrix_sweeps<decltype(fixed)::value>(contig, segs, first, last, pool);
        for (size_t k = 0; k < segs.size(); ++k) {
            Segment& sg = segs[k];
            const SegmentSeam& given = all[k];
            const bool mine = k >= first && k < last;
            const bool fits = given.begin == sg.begin && given.end == sg.end &&
                              given.product.size() == (k == 0 ? S : S * S);
            // Recomputed seams must be bit for bit those given: otherwise the other processes
            // saw another sequence, profile or options, and the boundary vectors would be wrong.
            if (!fits || (mine && !given_marks[k] &&
                          (given.product != sg.product || given.exponent != sg.product_exponent)))
                throw mismatch(k);
            if (!mine) {
                sg.product = given.product;
                sg.product_exponent = given.exponent;
            }
        }
        return sweep_segments<decltype(fixed)::value>(contig, segs, first, last, sink, take, pool);
    });
}
template DecodeResult PosteriorDecoder::run_segmented<1>(const Contig&, DecodeSink&, TaskPool*,
                                                         EarlySweeps*);
template DecodeResult PosteriorDecoder::run_segmented<2>(const Contig&, DecodeSink&, TaskPool*,
                                                         EarlySweeps*);
template DecodeResult PosteriorDecoder::run_segmented<3>(const Contig&, DecodeSink&, TaskPool*,
                                                         EarlySweeps*);
template DecodeResult PosteriorDecoder::run_segmented<4>(const Contig&, DecodeSink&, TaskPool*,
                                                         EarlySweeps*);
template DecodeResult PosteriorDecoder::run_segmented<5>(const Contig&, DecodeSink&, TaskPool*,
                                                         EarlySweeps*);
template DecodeResult PosteriorDecoder::run_segmented<6>(const Contig&, DecodeSink&, TaskPool*,
                                                         EarlySweeps*);

}  // namespace tidemark
