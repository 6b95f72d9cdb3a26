// Call ends at base resolution: window models' calls moved from the window grid to the most
// likely change point between the two classes that meet there (IntervalCaller, call.hpp).
#include <algorithm>
#include <cstdlib>

#include "tidemark/call.hpp"
#include "tidemark/error.hpp"
#include "tidemark/window.hpp"

namespace tidemark {

int64_t best_change_point(const double* diff, int64_t n, int64_t prefer) {
    double sum = 0, best = 0;
    int64_t at = 0;
    for (int64_t k = 1; k <= n; ++k) {
        sum += diff[k - 1];
        // Later k are larger, so on an equal distance the earlier (smaller) one stays.
        if (sum > best || (sum == best && std::llabs(k - prefer) < std::llabs(at - prefer))) {
            best = sum;
            at = k;
        }
    }
    return at;
}

namespace {

// Windows by which a signature model's stretches reach beyond the search range on each side
// (tidemark's choice, measured on E. coli K-12 with 8 GC-matched V. cholerae O395 segments
// inserted, scripts/gc-matched-chimera.py, after fitting composition-shift: median boundary
// error 632 bp with the stretches inside the search range, 528 / 237 / 253 / 251 bp reaching
// 1 / 2 / 4 / 8 windows; 976 bp on the window grid. 4 kept: it also held on N16961 segments,
// 313 bp, tests/oracle/test_call_ends_signature.py; all measured before the ends needed
// ClassBaseScores::move_margin to leave the grid).
constexpr int64_t signature_reach = 4;

// A position where calls start or end, with the classes on either side (-1: not yet known).
struct Boundary {
    int64_t at = 0;
    int left = -1, right = -1;
    int64_t moved_to = 0;
};

// The region other than `except` with the highest posterior in a window (the lowest index
// among equals).
int likeliest_other(const double* row, int regions, int except) {
    int best = -1;
    for (int r = 0; r < regions; ++r)
        if (r != except && (best < 0 || row[r] > row[best])) best = r;
    return best;
}

}  // namespace

void IntervalCaller::refine_ends() {
    const ClassBaseScores& scores = *model_.class_base_scores;
    const Contig& contig = *contig_;
    const int64_t w = scores.window(), length = contig.length;
    const int R = scores.regions();
    if (calls_.empty()) return;
    if (static_cast<int64_t>(window_posteriors_.size()) != ((length - 1) / w + 1) * R)
        throw InternalError("IntervalCaller: window posteriors do not cover the contig");

    // Every call start and end; a call's own region fixes one side.
    std::vector<Boundary> bounds;
    bounds.reserve(calls_.size() * 2);
    for (const Call& c : calls_) {
        bounds.push_back({c.begin, -1, c.region, c.begin});
        bounds.push_back({c.end, c.region, -1, c.end});
    }
    std::sort(bounds.begin(), bounds.end(),
              [](const Boundary& a, const Boundary& b) { return a.at < b.at; });
    size_t kept = 0;  // one entry per position; the first call to name a side names it
    for (size_t i = 0; i < bounds.size(); ++i) {
        if (kept > 0 && bounds[kept - 1].at == bounds[i].at) {
            Boundary& b = bounds[kept - 1];
            if (b.left < 0) b.left = bounds[i].left;
            if (b.right < 0) b.right = bounds[i].right;
        } else {
            bounds[kept++] = bounds[i];
        }
    }
    bounds.resize(kept);

    std::vector<std::pair<int64_t, int64_t>> gaps;
    for (size_t i = 0; i < bounds.size(); ++i) {
        Boundary& b = bounds[i];
        const int64_t at = b.at;
        if (at <= 0 || at >= length || at % w != 0) continue;  // contig ends, gap-made ends
        uint8_t beside[2];
        contig.unpack(at - 1, 2, beside);
        if (beside[0] == base_unknown || beside[1] == base_unknown) continue;
        const int64_t window = at / w;
        // Which side holds a call (the other side's class, if unknown, is filled in below).
        const ClassBaseScores::CallSide call = b.left >= 0 && b.right >= 0
                                                   ? ClassBaseScores::CallSide::both
                                               : b.left >= 0 ? ClassBaseScores::CallSide::left
                                                             : ClassBaseScores::CallSide::right;
        if (b.left < 0) b.left = likeliest_other(&window_posteriors_[(window - 1) * R], R, b.right);
        if (b.right < 0) b.right = likeliest_other(&window_posteriors_[window * R], R, b.left);
        if (b.left < 0 || b.right < 0 || b.left == b.right) continue;
        // Split positions [lo, hi]: the window on each side, up to halfway to the neighbouring
        // ends (so ends keep their order and calls at least one base), not across an assembly
        // gap.
        int64_t lo = std::max<int64_t>(at - w, 0), hi = std::min(at + w, length);
        if (i > 0) lo = std::max(lo, bounds[i - 1].at + (at - bounds[i - 1].at - 1) / 2 + 1);
        if (i + 1 < bounds.size()) hi = std::min(hi, at + (bounds[i + 1].at - at - 1) / 2);
        unknown_runs_in(contig, lo, hi, assembly_gap_min_length, gaps);
        for (const auto& [gap_begin, gap_end] : gaps) {
            if (gap_end <= at) lo = std::max(lo, gap_end);
            if (gap_begin >= at) hi = std::min(hi, gap_begin);
        }
        // Signature models score the stretch on each side of a split as one draw: it reaches
        // signature_reach windows beyond the search range (not across the neighbouring ends or
        // an assembly gap), so that each class's side is judged with the composition of more of
        // its own bases.
        const int64_t reach = scores.signature_k() > 0 ? signature_reach * w : 0;
        int64_t from = std::max<int64_t>(lo - reach, 0), to = std::min(hi + reach, length);
        if (i > 0) from = std::max(from, bounds[i - 1].at);
        if (i + 1 < bounds.size()) to = std::min(to, bounds[i + 1].at);
        unknown_runs_in(contig, from, to, assembly_gap_min_length, gaps);
        for (const auto& [gap_begin, gap_end] : gaps) {
            if (gap_end <= at) from = std::max(from, gap_end);
            if (gap_begin >= at) to = std::min(to, gap_begin);
        }
        b.moved_to = lo + scores.change_point(contig, lo, hi, b.left, b.right, at - lo,
                                              std::min(from, lo), std::max(to, hi), call);
    }

    const auto moved = [&](int64_t at) {
        const auto it = std::lower_bound(bounds.begin(), bounds.end(), at,
                                         [](const Boundary& b, int64_t x) { return b.at < x; });
        return it->moved_to;
    };
    for (Call& c : calls_) {
        const int64_t begin = moved(c.begin), end = moved(c.end);
        if (begin == c.begin && end == c.end) continue;
        c.begin = begin;
        c.end = end;
        posterior_columns(c);
        c.composition = composition(contig, begin, end);
    }
}

void IntervalCaller::posterior_columns(Call& c) const {
    const int64_t w = model_.class_base_scores->window();
    const int R = model_.class_base_scores->regions();
    double sum = 0, low = 1;
    int64_t confident = 0, core_begin = -1, core_end = -1;
    for (int64_t from = c.begin; from < c.end;) {
        const int64_t window = from / w, to = std::min(c.end, (window + 1) * w);
        const double p = window_posteriors_[static_cast<size_t>(window * R + c.region)];
        sum += p * static_cast<double>(to - from);
        low = std::min(low, p);
        if (p >= options_.min_posterior && p >= options_.high_posterior) {
            confident += to - from;
            if (core_begin < 0) core_begin = from;
            core_end = to;
        }
        from = to;
    }
    c.mean_posterior = sum / static_cast<double>(c.end - c.begin);
    c.min_posterior = low;
    c.confident_bases = confident;
    c.core_begin = core_begin < 0 ? c.begin : core_begin;
    c.core_end = core_begin < 0 ? c.begin : core_end;
}

}  // namespace tidemark
