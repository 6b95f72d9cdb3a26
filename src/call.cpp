// Interval calling from region posteriors (with the joining of spans across segments) and the
// published island criteria.
#include "tidemark/call.hpp"

#include <algorithm>
#include <cmath>

#include "tidemark/error.hpp"
#include "tidemark/window.hpp"

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
        case IslandCriteria::none:
            return true;
        case IslandCriteria::ggf1987:
            return length >= 200 && gc > 0.5 && oe > 0.6;
        case IslandCriteria::tj2002:
            return length > 500 && gc >= 0.55 && oe >= 0.65;
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
    ended_ = false;
    calls_.clear();
    lanes_.assign(reported_.size(), Lane{});
    window_posteriors_.clear();
}

std::unique_ptr<DecodeSink> IntervalCaller::fork() const {
    return std::make_unique<IntervalCaller>(model_, options_);
}

void IntervalCaller::restore_span(std::vector<Lane> lanes, std::vector<Call> calls) {
    if (lanes.size() != reported_.size())
        throw InputError("restored caller state has " + std::to_string(lanes.size()) +
                         " regions, the profile reports " + std::to_string(reported_.size()));
    lanes_ = std::move(lanes);
    calls_ = std::move(calls);
    ended_ = false;
}

void IntervalCaller::finish(const Group& g, int region) {
    const int64_t length = g.end - g.begin;
    if (length < options_.min_length) return;
    Call call;
    call.begin = g.begin;
    call.end = g.end;
    call.region = region;
    call.mean_posterior = g.sum / static_cast<double>(length);
    call.min_posterior = g.min;
    call.confident_bases = g.confident;
    call.core_begin = g.core_begin < 0 ? g.begin : g.core_begin;
    call.core_end = g.core_begin < 0 ? g.begin : g.core_end;
    call.composition = composition_source_ ? composition_source_(call.begin, call.end)
                                           : composition(*contig_, call.begin, call.end);
    // CpG-island criteria judge CpG islands only; other region types keep their calls.
    if (model_.region_names[static_cast<size_t>(region)] == island_region_name &&
        !meets_island_criteria(options_.criteria, length, call.composition))
        return;
    // A stretch without a CpG (in particular one without C or without G, whose o/e is undefined)
    // cannot be a CpG island, whatever the model says: purine-rich low-complexity repeats such as
    // (GGGA)n can look closer to an island table than to any background. Such a call is dropped.
    if (model_.region_names[static_cast<size_t>(region)] == island_region_name &&
        call.composition.cpg == 0)
        return;
    calls_.push_back(call);
}

void IntervalCaller::close(Lane& lane, int region) {
    if (!lane.active) return;
    lane.active = false;
    if (!lane.has_first) {  // the span's first group may still merge with an earlier span
        lane.has_first = true;
        lane.first = lane.open;
        return;
    }
    finish(lane.open, region);
}

void IntervalCaller::meet_gap(Lane& lane, int region) {
    if (lane.seen)
        close(lane, region);
    else
        lane.lead_gap = true;
}

void IntervalCaller::join(DecodeSink& later) {
    auto* other = dynamic_cast<IntervalCaller*>(&later);
    if (!other) throw InternalError("IntervalCaller::join: not a fork of an IntervalCaller");
    if (other->ended_ || !contig_ || ended_) {  // a whole later contig (refined at its end)
        // Swapped: a fork reused for a later contig keeps these buffers (pipeline.hpp).
        calls_.swap(other->calls_);
        lanes_.swap(other->lanes_);
        contig_ = other->contig_;
        ended_ = other->ended_;
        return;
    }
    if (model_.class_base_scores)  // window models are never decoded in segments
        throw InternalError("IntervalCaller: a window model's contig joined from segments");
    const int64_t gap_limit = std::max<int64_t>(options_.merge_gap, 1);
    for (size_t k = 0; k < reported_.size(); ++k) {
        const int region = reported_[k];
        Lane& a = lanes_[k];
        Lane& b = other->lanes_[k];
        if (!b.seen) {  // the later span is all gap
            if (b.lead_gap) {
                meet_gap(a, region);
                continue;
            }
            if (!a.seen) {
                a.lead_sum += b.lead_sum;
                a.lead_min = std::min(a.lead_min, b.lead_min);
            } else if (a.active) {
                a.gap_sum += b.lead_sum;
                a.gap_min = std::min(a.gap_min, b.lead_min);
            }
            continue;
        }
        if (!a.seen) {
            b.lead_sum += a.lead_sum;
            b.lead_min = std::min(a.lead_min, b.lead_min);
            b.lead_gap = b.lead_gap || a.lead_gap;
            a = b;
            continue;
        }
        // b's first group: closed and kept, or still open.
        Group first = b.has_first ? b.first : b.open;
        if (a.active && !b.lead_gap && first.begin - a.open.end < gap_limit) {
            Group& g = a.open;
            g.sum += a.gap_sum + b.lead_sum;
            g.sum += first.sum;
            g.min = std::min({g.min, a.gap_min, b.lead_min, first.min});
            g.confident += first.confident;
            if (g.core_begin < 0) g.core_begin = first.core_begin;
            if (first.core_begin >= 0) g.core_end = first.core_end;
            g.end = first.end;
            if (b.has_first) {  // more groups follow in b: the merged one is closed
                close(a, region);
                a.active = b.active;
                a.open = b.open;
                a.gap_sum = b.gap_sum;
                a.gap_min = b.gap_min;
            } else {
                a.gap_sum = b.gap_sum;
                a.gap_min = b.gap_min;
            }
        } else {
            close(a, region);
            if (b.has_first) finish(b.first, region);
            a.active = b.active;
            a.open = b.open;
            a.gap_sum = b.gap_sum;
            a.gap_min = b.gap_min;
        }
    }
    calls_.insert(calls_.end(), other->calls_.begin(), other->calls_.end());
}

void IntervalCaller::block(const BlockView& view) {
    const int S = view.states;
    const double threshold = options_.min_posterior;
    const int64_t gap_limit = std::max<int64_t>(options_.merge_gap, 1);
    unknown_runs_in(*contig_, view.begin, view.begin + view.size, assembly_gap_min_length, gaps_);
    if (model_.class_base_scores) {  // each window's region posteriors, at its first base
        const int64_t w = model_.class_base_scores->window();
        for (int64_t t = (w - view.begin % w) % w; t < view.size; t += w) {
            if ((view.begin + t) / w * S != static_cast<int64_t>(window_posteriors_.size()))
                throw InternalError("IntervalCaller: window posteriors out of order");
            window_posteriors_.insert(window_posteriors_.end(), view.posterior + t * S,
                                      view.posterior + (t + 1) * S);
        }
    }
    for (size_t k = 0; k < reported_.size(); ++k) {
        const int region = reported_[k];
        Lane& lane = lanes_[k];
        Group& open = lane.open;
        // Instantiated twice: the usual one-state region reads its column directly; otherwise
        // the region's states are summed in index order.
        // Over [t, to) of the view, which holds no assembly gap.
        const auto scan = [&](auto posterior_at, int64_t t, int64_t to) {
            if (!lane.seen) {  // before the span's first run: only the lead's sum and minimum
                for (; t < to; ++t) {
                    const double p = posterior_at(t);
                    if (p >= threshold) break;
                    lane.lead_sum += p;
                    lane.lead_min = std::min(lane.lead_min, p);
                }
                if (t == to) return;
                lane.seen = true;
            }
            for (; t < to; ++t) {
                if (!lane.active) {
                    // Nothing open: only a base at or above the threshold changes anything.
                    while (t < to && posterior_at(t) < threshold) ++t;
                    if (t == to) break;
                }
                const double p = posterior_at(t);
                const int64_t pos = view.begin + t;
                if (p >= threshold) {
                    if (lane.active && pos - open.end < gap_limit) {
                        // extend; after a short gap the gap's bases become part of the call
                        open.sum += lane.gap_sum;
                        open.min = std::min(open.min, lane.gap_min);
                    } else {
                        close(lane, region);
                        lane.active = true;
                        open.begin = pos;
                        open.sum = 0;
                        open.min = 1;
                        open.core_begin = open.core_end = -1;
                        open.confident = 0;
                    }
                    open.sum += p;
                    open.min = std::min(open.min, p);
                    open.end = pos + 1;
                    if (p >= options_.high_posterior) {
                        if (open.core_begin < 0) open.core_begin = pos;
                        open.core_end = pos + 1;
                        ++open.confident;
                    }
                    lane.gap_sum = 0;
                    lane.gap_min = 1;
                } else if (pos - open.end + 1 >= options_.merge_gap) {
                    close(lane, region);  // the gap is already too long to be merged
                } else {
                    lane.gap_sum += p;
                    lane.gap_min = std::min(lane.gap_min, p);
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
        const std::vector<int>& of_state = model_.region_of_state;
        const auto one_state = [post, S, first](int64_t t) { return post[t * S + first]; };
        const auto summed = [post, S, region, &of_state](int64_t t) {
            const double* row = post + t * S;
            double p = 0;
            for (int s = 0; s < S; ++s)
                if (of_state[s] == region) p += row[s];
            return p;
        };
        // The pieces between assembly gaps are scanned; a gap ends the open group.
        int64_t from = 0;
        for (size_t g = 0; g <= gaps_.size(); ++g) {
            const int64_t to = g < gaps_.size() ? gaps_[g].first - view.begin : view.size;
            if (to > from) {
                if (count == 1)
                    scan(one_state, from, to);
                else
                    scan(summed, from, to);
            }
            if (g == gaps_.size()) break;
            meet_gap(lane, region);
            from = gaps_[g].second - view.begin;
        }
    }
}

void IntervalCaller::end_contig(const Contig&, const DecodeResult&) {
    for (size_t k = 0; k < reported_.size(); ++k) {
        Lane& lane = lanes_[k];
        close(lane, reported_[k]);
        if (lane.has_first) finish(lane.first, reported_[k]);
        lane = Lane{};
    }
    ended_ = true;
    const auto by_position = [](const Call& a, const Call& b) {
        if (a.begin != b.begin) return a.begin < b.begin;
        if (a.end != b.end) return a.end < b.end;
        return a.region < b.region;
    };
    std::sort(calls_.begin(), calls_.end(), by_position);
    if (model_.class_base_scores && contig_) {
        refine_ends();
        std::sort(calls_.begin(), calls_.end(), by_position);
    }
    if (model_.signature_evidence && contig_ && !calls_.empty()) {
        // Window models are never split, so the caller holds the whole record here.
        const DinucleotideCounts record = dinucleotide_counts(*contig_, 0, contig_->length);
        for (Call& c : calls_)
            c.signature_distance =
                signature_distance(dinucleotide_counts(*contig_, c.begin, c.end), record);
    }
}

}  // namespace tidemark
