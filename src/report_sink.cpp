// The HTML report's sink: a bounded posterior sketch of each sequence collected while decoding,
// and the calls and windows the page shows (the page itself: report_html.cpp).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <tuple>

#include "tidemark/error.hpp"
#include "tidemark/report_html.hpp"
#include "tidemark/track.hpp"

namespace tidemark {

// ---------------------------------------------------------------------------------------------
// The sketch sink.

HtmlReport::HtmlReport(const Model& model, HtmlReportOptions options)
    : HtmlReport(model, options, false) {}

HtmlReport::HtmlReport(const Model& model, HtmlReportOptions options, bool /*forked*/)
    : model_(model), options_(options) {
    for (size_t r = 0; r < model.region_names.size(); ++r)
        if (model.region_report[r]) reported_.push_back(static_cast<int>(r));
    for (int s = 0; s < model.states; ++s)
        for (size_t k = 0; k < reported_.size(); ++k)
            if (model.region_of_state[static_cast<size_t>(s)] == reported_[k]) {
                summed_states_.push_back(s);
                slot_of_summed_.push_back(k);
            }
}

void HtmlReport::begin_contig(const Contig& contig) {
    begun_ = true;
    ended_ = false;
    length_ = contig.length;
    const auto R = static_cast<int64_t>(reported_.size());
    const int64_t budget = std::max<int64_t>(options_.sketch_values, 1);
    resolution_ = std::max<int64_t>(1, (length_ * R + budget - 1) / budget);
    first_bin_ = -1;
    sketch_.clear();
    unknown_ = contig.unknown;
    next_unknown_ = 0;
    pending_.assign(reported_.size(), 0.0);
    pending_bin_ = -1;
}

void HtmlReport::flush_bin() {
    if (pending_bin_ < 0) return;
    const size_t R = reported_.size();
    if (first_bin_ < 0) first_bin_ = pending_bin_;
    const auto at = static_cast<size_t>(pending_bin_ - first_bin_) * R;
    if (sketch_.size() < at + R) sketch_.resize(at + R, 0.0f);
    for (size_t k = 0; k < R; ++k) {
        sketch_[at + k] += static_cast<float>(pending_[k]);
        pending_[k] = 0.0;
    }
    pending_bin_ = -1;
}

void HtmlReport::block(const BlockView& view) {
    if (reported_.empty()) return;
    const int S = view.states;
    int64_t t = 0;
    while (t < view.size) {
        const int64_t pos = view.begin + t;
        // Unknown bases are left out: the posterior inside a gap is the model's prior, not a
        // statement about the sequence.
        while (next_unknown_ < unknown_.size() &&
               unknown_[next_unknown_].begin + unknown_[next_unknown_].length <= pos)
            ++next_unknown_;
        int64_t known_end = view.begin + view.size;
        if (next_unknown_ < unknown_.size()) {
            const UnknownRun& u = unknown_[next_unknown_];
            if (u.begin <= pos) {
                t = std::min(view.size, u.begin + u.length - view.begin);
                continue;
            }
            known_end = std::min(known_end, u.begin);
        }
        const int64_t bin = pos / resolution_;
        if (bin != pending_bin_) {
            flush_bin();
            pending_bin_ = bin;
        }
        // Known positions of this bin inside the block, summed in position order.
        const int64_t stop =
            std::min({view.size, (bin + 1) * resolution_ - view.begin, known_end - view.begin});
        const size_t n = summed_states_.size();
        if (reported_.size() == 1) {  // one sum in a register (the common case)
            double sum = 0;
            for (; t < stop; ++t) {
                const double* p = view.posterior + t * S;
                for (size_t i = 0; i < n; ++i) sum += p[summed_states_[i]];
            }
            pending_[0] += sum;
        } else {
            for (; t < stop; ++t) {
                const double* p = view.posterior + t * S;
                for (size_t i = 0; i < n; ++i) pending_[slot_of_summed_[i]] += p[summed_states_[i]];
            }
        }
    }
}

std::unique_ptr<DecodeSink> HtmlReport::fork() const {
    return std::unique_ptr<DecodeSink>(new HtmlReport(model_, options_, true));
}

void HtmlReport::join(DecodeSink& later) {
    auto* other = dynamic_cast<HtmlReport*>(&later);
    if (!other) throw InternalError("HtmlReport::join: not a fork of an HtmlReport");
    other->flush_bin();
    if (other->ended_ || !begun_ || ended_) {  // a whole later sequence
        begun_ = other->begun_;
        ended_ = other->ended_;
        length_ = other->length_;
        resolution_ = other->resolution_;
        first_bin_ = other->first_bin_;
        sketch_ = std::move(other->sketch_);
        unknown_ = std::move(other->unknown_);
        next_unknown_ = 0;
        pending_.assign(reported_.size(), 0.0);
        pending_bin_ = -1;
        return;
    }
    // A later segment of the sequence in progress: its bins follow ours; a bin cut by the seam
    // gets both parts.
    flush_bin();
    if (other->first_bin_ < 0) return;
    if (first_bin_ < 0) {
        first_bin_ = other->first_bin_;
        sketch_ = std::move(other->sketch_);
        return;
    }
    const size_t R = reported_.size();
    const auto at = static_cast<size_t>(other->first_bin_ - first_bin_) * R;
    // The sequence's whole sketch at once, rather than doubling segment by segment.
    const auto whole = static_cast<size_t>((length_ + resolution_ - 1) / resolution_) * R;
    if (sketch_.capacity() < whole) sketch_.reserve(whole);
    if (sketch_.size() < at + other->sketch_.size())
        sketch_.resize(at + other->sketch_.size(), 0.0f);
    for (size_t i = 0; i < other->sketch_.size(); ++i) sketch_[at + i] += other->sketch_[i];
}

namespace {

// Ranking of calls for the example windows and the most-confident table: higher mean
// posterior, then longer, then earlier.
auto confidence_key(const Call& c, int64_t ordinal) {
    return std::make_tuple(-c.mean_posterior, -(c.end - c.begin), ordinal, c.begin, c.region);
}
bool more_confident(const ListedCall& a, const ListedCall& b) {
    return confidence_key(a.call, a.ordinal) < confidence_key(b.call, b.ordinal);
}
bool longer(const ListedCall& a, const ListedCall& b) {
    return std::make_tuple(-(a.call.end - a.call.begin), -a.call.mean_posterior, a.ordinal,
                           a.call.begin, a.call.region) <
           std::make_tuple(-(b.call.end - b.call.begin), -b.call.mean_posterior, b.ordinal,
                           b.call.begin, b.call.region);
}
// Example windows: calls with sequence on both sides first (a call that spans its sequence
// shows no border), then by confidence.
auto example_key(const Call& c, int64_t ordinal, int64_t length) {
    const bool flanked = c.begin > 0 && c.end < length;
    return std::tuple_cat(std::make_tuple(!flanked), confidence_key(c, ordinal));
}
bool better_example(const CallWindow& a, const CallWindow& b) {
    return example_key(a.call, a.ordinal, a.sequence_length) <
           example_key(b.call, b.ordinal, b.sequence_length);
}

// Keeps the `most` first of `kept` under `before`, with `item` offered.
template <class Before>
void keep_ranked(std::vector<ListedCall>& kept, size_t most, const ListedCall& item,
                 Before before) {
    if (most == 0 || (kept.size() >= most && !before(item, kept.back()))) return;
    kept.insert(std::upper_bound(kept.begin(), kept.end(), item, before), item);
    if (kept.size() > most) kept.pop_back();
}

// Unknown bases in [0, p) of a contig, by binary search over its runs.
struct UnknownCount {
    const std::vector<UnknownRun>& runs;
    std::vector<int64_t> before;  ///< unknown bases in runs [0, i)
    explicit UnknownCount(const std::vector<UnknownRun>& r) : runs(r), before(r.size() + 1, 0) {
        for (size_t i = 0; i < runs.size(); ++i) before[i + 1] = before[i] + runs[i].length;
    }
    int64_t to(int64_t p) const {
        const auto i = static_cast<size_t>(
            std::lower_bound(runs.begin(), runs.end(), p,
                             [](const UnknownRun& u, int64_t v) { return u.begin < v; }) -
            runs.begin());
        int64_t n = before[i];
        if (i > 0 && runs[i - 1].begin + runs[i - 1].length > p)
            n -= runs[i - 1].begin + runs[i - 1].length - p;
        return n;
    }
    int64_t in(int64_t a, int64_t b) const { return to(b) - to(a); }
};

}  // namespace

void HtmlReport::finish_sequence(const Contig& contig, const std::vector<Call>& calls) {
    flush_bin();
    const int64_t ordinal = seen_++;
    const size_t R = reported_.size();
    const int64_t length = contig.length;
    for (const Call& c : calls) {
        ++calls_seen_;
        const ListedCall item{contig.name, ordinal, contig.offset, c};
        if (listed_.size() < static_cast<size_t>(std::max(options_.listed_calls, 0)))
            listed_.push_back(item);
        const auto ranked = static_cast<size_t>(std::max(options_.ranked_calls, 0));
        keep_ranked(most_confident_, ranked, item, more_confident);
        keep_ranked(longest_, ranked, item, longer);
    }
    if (length == 0 || R == 0) {
        sketch_.clear();
        return;
    }
    if (!begun_ || length_ != length)
        throw InternalError("HtmlReport: the sketch does not match sequence " + contig.name);
    const int64_t bins = (length + resolution_ - 1) / resolution_;
    // Bins before the first known base (a sequence that starts in a gap) hold nothing.
    if (first_bin_ > 0) sketch_.insert(sketch_.begin(), static_cast<size_t>(first_bin_) * R, 0.0f);
    first_bin_ = 0;
    sketch_.resize(static_cast<size_t>(bins) * R, 0.0f);
    const UnknownCount unknown(contig.unknown);
    const auto slot = [&](int region) {
        return static_cast<size_t>(std::find(reported_.begin(), reported_.end(), region) -
                                   reported_.begin());
    };
    // Mean posterior of slot k over the known bases of sketch bins [lo, hi); NaN when none.
    const auto mean = [&](int64_t lo, int64_t hi, size_t k) {
        double sum = 0;
        for (int64_t b = lo; b < hi; ++b) sum += sketch_[static_cast<size_t>(b) * R + k];
        const int64_t a = lo * resolution_, e = std::min(hi * resolution_, length);
        const int64_t known = e - a - unknown.in(a, e);
        return known > 0 ? static_cast<float>(sum / static_cast<double>(known))
                         : std::numeric_limits<float>::quiet_NaN();
    };
    const auto unknown_share = [&](int64_t a, int64_t e) {
        return e > a ? static_cast<float>(unknown.in(a, e)) / static_cast<float>(e - a) : 0.0f;
    };

    // The along-sequence figure keeps the longest sequences (ties: the earlier one).
    const auto limit = static_cast<size_t>(std::max(options_.shown_sequences, 0));
    bool keep = limit > 0;
    if (keep && shown_.size() >= limit) {
        auto shortest =
            std::min_element(shown_.begin(), shown_.end(), [](const auto& a, const auto& b) {
                return a.length != b.length ? a.length < b.length : a.ordinal > b.ordinal;
            });
        keep = shortest->length < length;
        if (keep) shown_.erase(shortest);
    }
    if (keep) {
        SequenceSketch sk;
        sk.name = contig.name;
        sk.ordinal = ordinal;
        sk.offset = contig.offset;
        sk.length = length;
        const int64_t wanted = std::max<int64_t>(1, options_.overview_bins);
        const int64_t per =
            ((length + wanted - 1) / wanted + resolution_ - 1) / resolution_;  // sketch bins
        sk.bin = per * resolution_;
        const int64_t n = (length + sk.bin - 1) / sk.bin;
        sk.posterior.resize(static_cast<size_t>(n) * R);
        sk.called.assign(static_cast<size_t>(n) * R, 0);
        sk.unknown.resize(static_cast<size_t>(n));
        for (int64_t i = 0; i < n; ++i) {
            for (size_t k = 0; k < R; ++k)
                sk.posterior[static_cast<size_t>(i) * R + k] =
                    mean(i * per, std::min((i + 1) * per, bins), k);
            sk.unknown[static_cast<size_t>(i)] =
                unknown_share(i * sk.bin, std::min((i + 1) * sk.bin, length));
        }
        for (const Call& c : calls)
            for (int64_t i = c.begin / sk.bin; i <= (c.end - 1) / sk.bin; ++i)
                sk.called[static_cast<size_t>(i) * R + slot(c.region)] = 1;
        shown_.insert(
            std::upper_bound(shown_.begin(), shown_.end(), sk,
                             [](const auto& a, const auto& b) { return a.ordinal < b.ordinal; }),
            std::move(sk));
    }

    // Example windows: this sequence's calls in example order, each taken when its window
    // clashes with no window taken before it on this sequence and it ranks among the
    // top_calls so far.
    const auto top = static_cast<size_t>(std::max(options_.top_calls, 0));
    std::vector<const Call*> order;
    for (const Call& c : calls) order.push_back(&c);
    std::sort(order.begin(), order.end(), [&](const Call* a, const Call* b) {
        return example_key(*a, ordinal, length) < example_key(*b, ordinal, length);
    });
    std::vector<std::pair<int64_t, int64_t>> taken;  // windows on this sequence
    for (const Call* cp : order) {
        if (top == 0 || taken.size() >= top) break;
        const Call& c = *cp;
        CallWindow w;
        w.name = contig.name;
        w.ordinal = ordinal;
        w.offset = contig.offset;
        w.sequence_length = length;
        w.call = c;
        if (windows_.size() >= top && !better_example(w, windows_.back()))
            break;  // nor is any later call of this sequence
        const int64_t flank = std::max<int64_t>(c.end - c.begin, 1000);
        const int64_t lo = std::max<int64_t>(0, c.begin - flank) / resolution_;
        const int64_t hi =
            std::min(bins, (std::min(length, c.end + flank) + resolution_ - 1) / resolution_);
        w.begin = lo * resolution_;
        w.end = std::min(length, hi * resolution_);
        const bool clash = std::any_of(taken.begin(), taken.end(), [&](const auto& t) {
            return w.begin < t.second && t.first < w.end;
        });
        if (clash) continue;
        taken.emplace_back(w.begin, w.end);
        const int64_t points = std::max<int64_t>(1, options_.window_points);
        const int64_t per = (hi - lo + points - 1) / points;
        w.bin = per * resolution_;
        for (int64_t b = lo; b < hi; b += per) {
            const int64_t e = std::min(b + per, hi);
            for (size_t k = 0; k < R; ++k) w.posterior.push_back(mean(b, e, k));
            w.unknown.push_back(unknown_share(b * resolution_, std::min(e * resolution_, length)));
        }
        // The composition over steps of whole points, each of at least 200 bases (the window
        // length of the Gardiner-Garden & Frommer 1987 island criteria; unless the window is
        // shorter), at most about 80 across the window: GC and CpG o/e of a dozen bases are
        // noise. The points are shared out evenly, so no step is a short remainder.
        const int64_t span = w.end - w.begin;
        const int64_t step_bases = std::max<int64_t>(200, (span + 79) / 80);
        const int64_t group = std::max<int64_t>(1, (step_bases + w.bin - 1) / w.bin);
        const auto n_points = static_cast<int64_t>(w.unknown.size());
        const int64_t steps = std::max<int64_t>(1, n_points / group);
        for (int64_t i = 0; i < steps; ++i) {
            const int64_t p0 = i * n_points / steps, p1 = (i + 1) * n_points / steps;
            const Composition comp =
                composition(contig, w.begin + p0 * w.bin, std::min(w.end, w.begin + p1 * w.bin));
            const float gc = comp.known() ? static_cast<float>(comp.gc_fraction())
                                          : std::numeric_limits<float>::quiet_NaN();
            const auto oe = static_cast<float>(comp.cpg_obs_exp());
            for (int64_t j = p0; j < p1; ++j) {
                w.gc.push_back(gc);
                w.cpg_obs_exp.push_back(oe);
            }
        }
        for (const Call& other : calls) {
            if (other.begin >= w.end) break;
            if (other.end > w.begin && w.nearby.size() < 200) w.nearby.push_back(other);
        }
        windows_.insert(std::upper_bound(windows_.begin(), windows_.end(), w, better_example),
                        std::move(w));
        if (windows_.size() > top) windows_.pop_back();
    }
    sketch_.clear();
    sketch_.shrink_to_fit();  // a long sequence's sketch is not kept while short ones follow
}

}  // namespace tidemark
