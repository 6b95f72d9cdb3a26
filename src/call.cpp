// Interval calling from region posteriors, published island criteria, and region totals.
#include "tidemark/call.hpp"

#include <algorithm>
#include <cmath>

#include "tidemark/error.hpp"

namespace tidemark {

IslandCriteria parse_island_criteria(const std::string& text) {
    if (text == "none") return IslandCriteria::none;
    if (text == "ggf1987") return IslandCriteria::ggf1987;
    if (text == "tj2002") return IslandCriteria::tj2002;
    throw UsageError("--island-criteria must be none, ggf1987 or tj2002, not '" + text + "'");
}

bool meets_island_criteria(IslandCriteria criteria, int64_t length, const Composition& comp) {
    const double gc = comp.gc_fraction();
    const double oe = comp.cpg_obs_exp();  // NaN compares false: no C or no G fails
    switch (criteria) {
        case IslandCriteria::none: return true;
        case IslandCriteria::ggf1987: return length >= 200 && gc > 0.5 && oe > 0.6;
        case IslandCriteria::tj2002: return length > 500 && gc >= 0.55 && oe >= 0.65;
    }
    return true;
}

IntervalCaller::IntervalCaller(const Model& model, CallOptions options)
    : model_(model), options_(options) {
    for (size_t r = 0; r < model.region_names.size(); ++r)
        if (model.region_report[r]) reported_.push_back(static_cast<int>(r));
}

void IntervalCaller::begin_contig(const Contig& contig) {
    contig_ = &contig;
    calls_.clear();
    open_.assign(reported_.size(), Open{});
}

void IntervalCaller::close(Open& open, int region) {
    if (!open.active) return;
    open.active = false;
    const int64_t length = open.end - open.begin;
    if (length < options_.min_length) return;
    Call call;
    call.begin = open.begin;
    call.end = open.end;
    call.region = region;
    call.mean_posterior = open.sum / static_cast<double>(length);
    call.min_posterior = open.min;
    call.core_begin = open.core_begin < 0 ? open.begin : open.core_begin;
    call.core_end = open.core_begin < 0 ? open.begin : open.core_end;
    call.composition = composition(*contig_, call.begin, call.end);
    if (!meets_island_criteria(options_.criteria, length, call.composition)) return;
    calls_.push_back(call);
}

void IntervalCaller::block(const BlockView& view) {
    const int S = view.states;
    const double threshold = options_.min_posterior;
    const int64_t gap_limit = std::max<int64_t>(options_.merge_gap, 1);
    for (size_t k = 0; k < reported_.size(); ++k) {
        const int region = reported_[k];
        Open& open = open_[k];
        // Instantiated twice: the usual one-state region reads its column directly; otherwise
        // the region's states are summed in index order.
        const auto scan = [&](auto posterior_at) {
            for (int64_t t = 0; t < view.size; ++t) {
                if (!open.active) {
                    // Nothing open: only a base at or above the threshold changes anything.
                    while (t < view.size && posterior_at(t) < threshold) ++t;
                    if (t == view.size) break;
                }
                const double p = posterior_at(t);
                const int64_t pos = view.begin + t;
                if (p >= threshold) {
                    if (open.active && pos - open.end < gap_limit) {
                        // extend; after a short gap the gap's bases become part of the call
                        open.sum += open.gap_sum;
                        open.min = std::min(open.min, open.gap_min);
                    } else {
                        close(open, region);
                        open.active = true;
                        open.begin = pos;
                        open.sum = 0;
                        open.min = 1;
                        open.core_begin = open.core_end = -1;
                    }
                    open.sum += p;
                    open.min = std::min(open.min, p);
                    open.end = pos + 1;
                    if (p >= options_.high_posterior) {
                        if (open.core_begin < 0) open.core_begin = pos;
                        open.core_end = pos + 1;
                    }
                    open.gap_sum = 0;
                    open.gap_min = 1;
                } else if (pos - open.end + 1 >= options_.merge_gap) {
                    close(open, region);  // the gap is already too long to be merged
                } else {
                    open.gap_sum += p;
                    open.gap_min = std::min(open.gap_min, p);
                }
            }
        };
        int first = -1, count = 0;
        for (int s = 0; s < S; ++s)
            if (model_.region_of_state[s] == region) {
                if (first < 0) first = s;
                ++count;
            }
        const double* post = view.posterior;
        if (count == 1) {
            scan([post, S, first](int64_t t) { return post[t * S + first]; });
        } else {
            const std::vector<int>& of_state = model_.region_of_state;
            scan([post, S, region, &of_state](int64_t t) {
                const double* row = post + t * S;
                double p = 0;
                for (int s = 0; s < S; ++s)
                    if (of_state[s] == region) p += row[s];
                return p;
            });
        }
    }
}

void IntervalCaller::end_contig(const Contig&, const DecodeResult&) {
    for (size_t k = 0; k < reported_.size(); ++k) close(open_[k], reported_[k]);
    std::sort(calls_.begin(), calls_.end(), [](const Call& a, const Call& b) {
        if (a.begin != b.begin) return a.begin < b.begin;
        if (a.end != b.end) return a.end < b.end;
        return a.region < b.region;
    });
}

}  // namespace tidemark
