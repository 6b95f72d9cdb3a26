// The HTML report's sink: a bounded posterior sketch of each sequence collected while decoding,
// and the calls and windows the page shows (the page itself: report_html.cpp).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
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
        const int64_t bin = pos / resolution_;
        if (bin != pending_bin_) {
            flush_bin();
            pending_bin_ = bin;
        }
        // Positions of this bin inside the block, summed in position order.
        const int64_t stop = std::min(view.size, (bin + 1) * resolution_ - view.begin);
        const size_t n = summed_states_.size();
        if (reported_.size() ==
            1) {  // one sum in a register (the common case: one reported region)
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

// Ranking of calls for the top windows: higher mean posterior, then longer, then earlier.
bool more_confident(const CallWindow& a, const CallWindow& b) {
    return std::make_tuple(-a.call.mean_posterior, -(a.call.end - a.call.begin), a.ordinal,
                           a.call.begin, a.call.region) <
           std::make_tuple(-b.call.mean_posterior, -(b.call.end - b.call.begin), b.ordinal,
                           b.call.begin, b.call.region);
}

}  // namespace

void HtmlReport::finish_sequence(const Contig& contig, const std::vector<Call>& calls) {
    flush_bin();
    const int64_t ordinal = seen_++;
    const size_t R = reported_.size();
    const int64_t length = contig.length;
    if (length == 0 || R == 0) {
        sketch_.clear();
        return;
    }
    if (!begun_ || length_ != length || first_bin_ > 0)
        throw InternalError("HtmlReport: the sketch does not match sequence " + contig.name);
    const int64_t bins = (length + resolution_ - 1) / resolution_;
    sketch_.resize(static_cast<size_t>(bins) * R, 0.0f);
    const auto slot = [&](int region) {
        return static_cast<size_t>(std::find(reported_.begin(), reported_.end(), region) -
                                   reported_.begin());
    };
    // Mean posterior of slot k over sketch bins [lo, hi).
    const auto mean = [&](int64_t lo, int64_t hi, size_t k) {
        double sum = 0;
        for (int64_t b = lo; b < hi; ++b) sum += sketch_[static_cast<size_t>(b) * R + k];
        const int64_t bases = std::min(hi * resolution_, length) - lo * resolution_;
        return bases > 0 ? static_cast<float>(sum / static_cast<double>(bases)) : 0.0f;
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
        sk.unknown.assign(static_cast<size_t>(n), 0.0f);
        for (int64_t i = 0; i < n; ++i)
            for (size_t k = 0; k < R; ++k)
                sk.posterior[static_cast<size_t>(i) * R + k] =
                    mean(i * per, std::min((i + 1) * per, bins), k);
        for (const Call& c : calls)
            for (int64_t i = c.begin / sk.bin; i <= (c.end - 1) / sk.bin; ++i)
                sk.called[static_cast<size_t>(i) * R + slot(c.region)] = 1;
        for (const UnknownRun& u : contig.unknown) {
            for (int64_t i = u.begin / sk.bin; i <= (u.begin + u.length - 1) / sk.bin && i < n;
                 ++i) {
                const int64_t lo = std::max(u.begin, i * sk.bin),
                              hi = std::min(u.begin + u.length, (i + 1) * sk.bin);
                const int64_t width = std::min((i + 1) * sk.bin, length) - i * sk.bin;
                sk.unknown[static_cast<size_t>(i)] +=
                    static_cast<float>(hi - lo) / static_cast<float>(width);
            }
        }
        shown_.insert(
            std::upper_bound(shown_.begin(), shown_.end(), sk,
                             [](const auto& a, const auto& b) { return a.ordinal < b.ordinal; }),
            std::move(sk));
    }

    // Windows around the calls that rank among the most confident so far.
    const auto top = static_cast<size_t>(std::max(options_.top_calls, 0));
    for (const Call& c : calls) {
        if (top == 0) break;
        CallWindow w;
        w.name = contig.name;
        w.ordinal = ordinal;
        w.offset = contig.offset;
        w.call = c;
        if (windows_.size() >= top && !more_confident(w, windows_.back())) continue;
        const int64_t flank = std::max<int64_t>(c.end - c.begin, 1000);
        const int64_t lo = std::max<int64_t>(0, c.begin - flank) / resolution_;
        const int64_t hi =
            std::min(bins, (std::min(length, c.end + flank) + resolution_ - 1) / resolution_);
        const int64_t points = std::max<int64_t>(1, options_.window_points);
        const int64_t per = (hi - lo + points - 1) / points;
        w.bin = per * resolution_;
        w.begin = lo * resolution_;
        w.end = std::min(length, hi * resolution_);
        for (int64_t b = lo; b < hi; b += per)
            for (size_t k = 0; k < R; ++k) w.posterior.push_back(mean(b, std::min(b + per, hi), k));
        for (const Call& other : calls) {
            if (other.begin >= w.end) break;
            if (other.end > w.begin && w.nearby.size() < 200) w.nearby.push_back(other);
        }
        windows_.insert(std::upper_bound(windows_.begin(), windows_.end(), w, more_confident),
                        std::move(w));
        if (windows_.size() > top) windows_.pop_back();
    }
    sketch_.clear();
    sketch_.shrink_to_fit();  // a long sequence's sketch is not kept while short ones follow
}

}  // namespace tidemark
