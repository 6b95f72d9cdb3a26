// Supervised training: observed counts of transitions and emissions along a path given by
// labelled BED intervals (one state per region), fed to the same M-step as Baum-Welch.
#include <fmt/format.h>

#include <algorithm>
#include <map>

#include "tidemark/error.hpp"
#include "tidemark/suggest.hpp"
#include "tidemark/train.hpp"

namespace tidemark {
namespace {

struct Label {
    int64_t begin = 0, end = 0;
    int region = 0;
};

std::string describe(const Interval& iv) {
    // As the BED line has it: 0-based, half-open.
    return fmt::format("'{} {} {} {}' (BED: 0-based, half-open)", iv.chrom, iv.begin, iv.end,
                       iv.name);
}

}  // namespace

TrainingCounts labelled_counts(const Profile& p, TrainingData& data,
                               const std::vector<Interval>& labels,
                               const std::string& default_region, const Logger& log) {
    const int R = static_cast<int>(p.regions.size());
    std::vector<int> state_of(R, -1);
    for (int r = 0; r < R; ++r) {
        std::string names;
        int n = 0;
        for (size_t s = 0; s < p.states.size(); ++s)
            if (p.states[s].region == r) {
                state_of[r] = static_cast<int>(s);
                names += (n++ ? ", " : "") + p.states[s].name;
            }
        if (n != 1)
            throw InputError(
                fmt::format("labelled counting needs exactly one state per region, but region '{}' "
                            "of profile '{}' has {} ({}); fit it with Baum-Welch instead",
                            p.regions[r].name, p.name, n, names));
    }
    const int fallback = p.region_index(default_region);
    if (fallback < 0)
        throw UsageError(fmt::format("--default-region '{}' is not a region of profile '{}'",
                                     default_region, p.name));

    std::string region_list;
    std::vector<std::string> region_names;
    for (const auto& r : p.regions) {
        region_list += (region_list.empty() ? "" : ", ") + r.name;
        region_names.push_back(r.name);
    }
    std::map<std::string, std::vector<std::pair<Label, const Interval*>>> by_chrom;
    for (const Interval& iv : labels) {
        const int r = p.region_index(iv.name);
        if (r < 0)
            throw InputError(fmt::format(
                "labels: interval {} names region '{}', which profile '{}' does not "
                "have (regions: {}){}",
                describe(iv), iv.name, p.name, region_list, did_you_mean(iv.name, region_names)));
        if (iv.end > iv.begin) by_chrom[iv.chrom].push_back({{iv.begin, iv.end, r}, &iv});
    }
    for (auto& [chrom, list] : by_chrom) {
        std::stable_sort(list.begin(), list.end(), [](const auto& a, const auto& b) {
            return a.first.begin < b.first.begin;
        });
        for (size_t i = 1; i < list.size(); ++i)
            if (list[i].first.begin < list[i - 1].first.end)
                throw InputError(fmt::format(
                    "labels: intervals {} and {} overlap; every base can have only one label",
                    describe(*list[i - 1].second), describe(*list[i].second)));
    }

    TrainingCounts c = TrainingCounts::zero(p);
    std::vector<uint8_t> bases;
    size_t used = 0;
    data.for_each([&](const Contig& contig) {
        const int64_t N = contig.length;
        if (N == 0) return;
        ++c.contigs;
        c.positions += N;
        static const std::vector<std::pair<Label, const Interval*>> none;
        auto it = by_chrom.find(contig.name);
        const auto& list = it == by_chrom.end() ? none : it->second;
        size_t li = 0;
        int prev_state = -1, copy = 0;
        int64_t segment_start = 0;
        RollingContext ctx;
        constexpr int64_t chunk = int64_t{1} << 16;
        for (int64_t start = 0; start < N; start += chunk) {
            const int64_t n = std::min(chunk, N - start);
            bases.resize(static_cast<size_t>(n));
            contig.unpack(start, n, bases.data());
            for (int64_t t = 0; t < n; ++t) {
                const int64_t pos = start + t;
                const int64_t on_seq = contig.offset + pos;
                while (li < list.size() && list[li].first.end <= on_seq) ++li;
                int region = fallback;
                if (li < list.size() && list[li].first.begin <= on_seq) {
                    region = list[li].first.region;
                    if (pos == 0 || on_seq == list[li].first.begin) ++used;
                }
                const int s = state_of[region];
                const int L = static_cast<int>(p.regions[region].min_length);
                if (pos == 0) {
                    c.initial[s] += 1;
                    copy = 1;
                    segment_start = 0;
                } else {
                    const int Lp =
                        static_cast<int>(p.regions[p.states[prev_state].region].min_length);
                    const bool same = p.states[prev_state].region == region;
                    if (!same && copy < Lp)
                        throw InputError(
                            fmt::format("contig '{}': the labelled segment of region '{}' at {}-{} "
                                        "(1-based) is {} bp, "
                                        "shorter than the region's min_length {}",
                                        contig.name, p.regions[p.states[prev_state].region].name,
                                        contig.offset + segment_start + 1, contig.offset + pos,
                                        pos - segment_start, Lp));
                    c.transitions[prev_state][s] += 1;
                    if (copy < Lp) c.chain_steps[prev_state] += 1;
                    if (same) {
                        copy = std::min(copy + 1, L);
                    } else {
                        copy = 1;
                        segment_start = pos;
                    }
                }
                prev_state = s;
                const uint8_t b = bases[static_cast<size_t>(t)];
                if (b == base_unknown) {
                    ctx.push(b);
                    continue;
                }
                ++c.known;
                const int k = p.states[s].order;
                if (ctx.complete(k)) c.emissions[s][ctx.row(k)][b] += 1;
                ctx.push(b);
            }
        }
        if (!list.empty() && list.back().first.end > contig.offset + N)
            log.warn(fmt::format(
                "labels: interval {} extends past the end of '{}' ({} bp); the part beyond "
                "is ignored",
                describe(*list.back().second), contig.name, contig.offset + N));
    });
    if (!labels.empty() && used == 0)
        log.warn(
            "labels: no labelled interval overlaps the training sequences; every base was counted "
            "in the default region '" +
            default_region + "'");
    return c;
}

}  // namespace tidemark
