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
    call.composition = composition(*contig_, call.begin, call.end);
    if (!meets_island_criteria(options_.criteria, length, call.composition)) return;
    calls_.push_back(call);
}

void IntervalCaller::block(const BlockView& view) {
    const int S = view.states;
    for (size_t k = 0; k < reported_.size(); ++k) {
        const int region = reported_[k];
        Open& open = open_[k];
        for (int64_t t = 0; t < view.size; ++t) {
            const double* row = view.posterior + t * S;
            double p = 0;
            for (int s = 0; s < S; ++s)
                if (model_.region_of_state[s] == region) p += row[s];
            const int64_t pos = view.begin + t;
            if (p >= options_.min_posterior) {
                if (open.active && pos - open.end < std::max<int64_t>(options_.merge_gap, 1)) {
                    // extend; after a short gap the gap's bases become part of the call
                    open.sum += open.gap_sum;
                    open.min = std::min(open.min, open.gap_min);
                } else {
                    close(open, region);
                    open.active = true;
                    open.begin = pos;
                    open.sum = 0;
                    open.min = 1;
                }
                open.sum += p;
                open.min = std::min(open.min, p);
                open.end = pos + 1;
                open.gap_sum = 0;
                open.gap_min = 1;
            } else if (open.active) {
                if (pos - open.end + 1 >= options_.merge_gap) {
                    close(open, region);  // the gap is already too long to be merged
                } else {
                    open.gap_sum += p;
                    open.gap_min = std::min(open.gap_min, p);
                }
            }
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
