// The HTML report's page: tables and inline SVG figures drawn here, without any plotting library
// or script (the sketch collected while decoding: report_sink.cpp).
#include "tidemark/report_html.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <tuple>

#include "report_html_internal.hpp"
#include "tidemark/contig_screen.hpp"
#include "tidemark/error.hpp"
#include "tidemark/track.hpp"

namespace tidemark {

// ---------------------------------------------------------------------------------------------
// The page.

std::string html_escape(std::string_view text) {
    std::string out;
    out.reserve(text.size());
    for (const char ch : text) {
        switch (ch) {
            case '&':
                out += "&amp;";
                break;
            case '<':
                out += "&lt;";
                break;
            case '>':
                out += "&gt;";
                break;
            case '"':
                out += "&quot;";
                break;
            case '\'':
                out += "&#39;";
                break;
            default:
                out += ch;
        }
    }
    return out;
}

namespace {

using namespace report_detail;

struct Page {
    const HtmlReportInput& in;
    const Model& model;
    const std::vector<int>& reported;
    std::string out;

    void legend(bool unknown) {
        out += "<p class=\"legend\">";
        for (const int r : reported)
            out += fmt::format("<span><b class=\"sw\" style=\"color:{}\">\u25a0</b>{}</span>",
                               rgb(model, r), esc(model.region_names[static_cast<size_t>(r)]));
        if (unknown) out += "<span><b class=\"sw unk\">\u25a0</b>unknown bases (N)</span>";
        out += "</p>\n";
    }

    bool cpg_profile() const {
        return std::find(model.region_names.begin(), model.region_names.end(),
                         island_region_name) != model.region_names.end();
    }

    // The calling rules as they act: the options and the model's own minimum segment lengths
    // (region min_length chains, whole windows for window profiles), which the options alone
    // do not show.
    std::string calling_line() const {
        const CallOptions& c = *in.calling;
        std::string line = fmt::format("P(region) &ge; {}", num(c.min_posterior, 3));
        line += c.merge_gap > 1
                    ? fmt::format("; runs fewer than {} bp apart merged", grouped(c.merge_gap))
                    : std::string("; runs not merged");
        // The profile, not the model: window profiles reach the report through a per-base
        // model without the window chains.
        const Profile& profile = *in.profile;
        const int64_t window = profile.window_size;
        std::vector<std::pair<std::string, int64_t>> shortest;  // per reported region
        for (const int r : reported)
            shortest.emplace_back(
                model.region_names[static_cast<size_t>(r)],
                std::max(c.min_length, profile.chain_length(r) * std::max<int64_t>(window, 1)));
        const bool same = std::all_of(shortest.begin(), shortest.end(), [&](const auto& x) {
            return x.second == shortest.front().second;
        });
        std::string minimum;
        if (same && !shortest.empty())
            minimum = grouped(shortest.front().second) + " bp";
        else
            for (const auto& [name, bp] : shortest)
                minimum += (minimum.empty() ? "" : ", ") + esc(name) + " " + grouped(bp) + " bp";
        line += "; calls &ge; " + minimum;
        const bool from_profile = std::any_of(shortest.begin(), shortest.end(), [&](const auto& x) {
            return x.second > c.min_length;
        });
        if (window > 0 || from_profile)
            line += fmt::format(
                " <span class=\"dim\">(--min-length {} bp{}{}; a call cut by the end of a "
                "sequence may be shorter)</span>",
                grouped(c.min_length),
                from_profile ? "; the profile's minimum segment (regions[].min_length)" : "",
                window > 0 ? fmt::format("; calls are whole {}-bp windows", grouped(window)) : "");
        line += fmt::format("; core P &ge; {}; island criteria {}", num(c.high_posterior, 3),
                            criteria_name(c.criteria));
        return line;
    }

    void warnings_box() {
        if (!in.warnings || in.warnings->empty()) return;
        const size_t all = std::max(in.warning_count, in.warnings->size());
        out += fmt::format("<section class=\"warn\" id=\"warnings\">\n<h2>{}</h2>\n<ul>\n",
                           all == 1 ? std::string("Warning") : fmt::format("{} warnings", all));
        for (const auto& w : *in.warnings) out += "<li>" + esc(w) + "</li>\n";
        out += "</ul>\n";
        if (all > in.warnings->size())
            out += fmt::format("<p>The first {} are listed; all {} are on standard error.</p>\n",
                               in.warnings->size(), all);
        out += "</section>\n";
    }

    void run_section() {
        const RunInfo& info = *in.info;
        const Profile& profile = *in.profile;
        out += "<section id=\"run\">\n<h2>Run</h2>\n<table class=\"kv\">\n";
        const auto row = [&](const char* key, const std::string& value_html) {
            out += fmt::format("<tr><th>{}</th><td>{}</td></tr>\n", key, value_html);
        };
        std::string inputs;
        for (const auto& f : info.inputs)
            inputs += (inputs.empty() ? "" : "<br>") +
                      ("<code>" + esc(f == "-" ? "standard input" : f) + "</code>");
        row("input", inputs);
        std::string prof = "<b>" + esc(profile.name) + "</b>";
        if (!profile.description.empty()) prof += " \u2014 " + esc(profile.description);
        prof += " <span class=\"dim\">(CRC-32 " + esc(info.profile_checksum) + ")</span>";
        row("profile", prof);
        row("decoding",
            esc(info.decode_mode) + (info.decode_mode == "posterior"
                                         ? " (exact posterior of every region type at every base)"
                                         : " (single most probable state path)"));
        row("calling", calling_line());
        const auto& warnings = in.warnings ? *in.warnings : std::vector<std::string>{};
        row("warnings", warnings.empty() ? std::string("none")
                                         : fmt::format("{} (in the box at the top)",
                                                       grouped(static_cast<int64_t>(std::max(
                                                           in.warning_count, warnings.size())))));
        row("command", "<code>" + esc(info.command_line) + "</code>");
        row("tool", "tidemark " TIDEMARK_VERSION);
        out +=
            "</table>\n<h3>Region "
            "types</h3>\n<table>\n<tr><th></th><th>region</th><th>reported</th>"
            "<th>colour (R,G,B)</th><th>description</th></tr>\n";
        for (size_t r = 0; r < profile.regions.size(); ++r) {
            const RegionSpec& spec = profile.regions[r];
            out += fmt::format(
                "<tr><td><b class=\"sw\" style=\"color:{}\">\u25a0</b></td><td>{}</td><td>{}</td>"
                "<td>{}</td><td>{}</td></tr>\n",
                rgb(model, static_cast<int>(r)), esc(spec.name), spec.report ? "yes" : "no",
                esc(region_color(model, static_cast<int>(r))), esc(spec.description));
        }
        out += "</table>\n";
        if (!profile.sources.empty()) {
            out += "<details><summary>Sources of the profile's numbers</summary>\n<ul>\n";
            for (const auto& s : profile.sources) out += "<li>" + esc(s) + "</li>\n";
            out += "</ul>\n</details>\n";
        }
        out += "</section>\n";
    }

    void genome_section(const ContigSummary& g) {
        // Shares of known bases, as in the summary: gaps hold no calls and no expectation.
        const double len =
            g.composition.known() > 0 ? static_cast<double>(g.composition.known()) : 1.0;
        out +=
            "<section "
            "id=\"genome\">\n<h2>Genome-wide</h2>\n<table>\n<tr><th>sequences</th><th>length "
            "(bp)</th><th>N50 (bp)</th><th>L50</th>"
            "<th>unknown (bp)</th><th>soft-masked (bp)</th><th>GC</th><th>CpG "
            "o/e</th><th>log-likelihood</th></tr>\n";
        out += fmt::format(
            "<tr "
            "class=\"num\"><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</"
            "td><td>{}</td><td>{}</"
            "td><td>{}</td></tr>\n",
            grouped(static_cast<int64_t>(in.contigs->size())), grouped(g.length),
            grouped(n50().first), grouped(n50().second), grouped(g.unknown), grouped(g.soft_masked),
            g.composition.known() ? num(g.composition.gc_fraction(), 4) : "NA",
            num(g.composition.cpg_obs_exp(), 4), num(g.log_likelihood, 2));
        out +=
            "</table>\n<table>\n<tr><th>region</th><th>calls</th><th>called (bp)</th><th>called "
            "%</th>"
            "<th>expected %</th><th>shortest</th><th>median</th><th>longest</th><th>mean "
            "confidence</th></tr>\n";
        for (const int r : reported) {
            const auto ri = static_cast<size_t>(r);
            const LengthStats ls = length_stats(g.call_lengths[ri]);
            const bool any = g.calls[ri] > 0;
            out += fmt::format(
                "<tr class=\"num\"><td class=\"txt\"><b class=\"sw\" "
                "style=\"color:{}\">\u25a0</b>{}</td><td>{}</td>"
                "<td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></"
                "tr>\n",
                rgb(model, r), esc(model.region_names[ri]), grouped(g.calls[ri]),
                grouped(g.called_bases[ri]),
                num(100.0 * static_cast<double>(g.called_bases[ri]) / len, 3),
                num(100.0 * g.expected_bases[ri] / len, 3), any ? grouped(ls.min) : "\u2013",
                !any                                 ? "\u2013"
                : ls.median == std::floor(ls.median) ? grouped(static_cast<int64_t>(ls.median))
                                                     : num(ls.median, 1),
                any ? grouped(ls.max) : "\u2013",
                any ? num(g.confidence_sum[ri] / static_cast<double>(g.calls[ri]), 4) : "\u2013");
        }
        out +=
            "</table>\n<p class=\"note\">expected % = sum of the posterior over the known "
            "bases, as a share of the known bases; called % = known bases inside calls, as a "
            "share of the known bases (gaps of unknown bases hold no calls). Confidence of a "
            "call = its mean posterior.</p>\n</section>\n";
    }

    // Contig screening (ForeignContigRule): the contigs whose composition is foreign to the
    // assembly, in input order, up to max_rows (the summary lists them all). Only for profiles
    // the rule applies to, so that other reports stay as they were.
    void foreign_section() {
        if (!ForeignContigRule::applies(model)) return;
        constexpr size_t max_rows = 200;
        std::vector<const ContigSummary*> foreign;
        int64_t bases = 0;
        for (const auto& c : *in.contigs)
            if (ForeignContigRule::foreign(model, c)) {
                foreign.push_back(&c);
                bases += c.length;
            }
        std::string atypical;
        for (const int r : reported)
            atypical +=
                (atypical.empty() ? "" : ", ") + esc(model.region_names[static_cast<size_t>(r)]);
        // Profiles fitted with a contig screen (contig_screen.hpp) give screened contigs a
        // signature distance; only then the rule and the table say so.
        const bool screened =
            std::any_of(in.contigs->begin(), in.contigs->end(),
                        [](const auto& c) { return !std::isnan(c.composition_distance); });
        out += "<section id=\"foreign\">\n<h2>Contigs of foreign composition</h2>\n";
        out += fmt::format(
            "<p class=\"note\">A contig is listed when it has at least {} known bases (enough for "
            "one window that carries evidence) and its mean posterior of the atypical regions "
            "({}) over its known bases, P(atypical), is at least {}{}.</p>\n",
            grouped(ForeignContigRule::min_known(model)), atypical,
            num(ForeignContigRule::min_atypical, 1),
            screened
                ? fmt::format("; or when it has at least {} known bases and the distance of its "
                              "trinucleotide signature from the fitted genome's exceeds the "
                              "limit of the genome's own stretches of its length",
                              grouped(ContigScreenRule::min_known))
                : std::string());
        if (foreign.empty()) {
            out += "<p>No contig is foreign to the assembly by this rule.</p>\n</section>\n";
            return;
        }
        out += fmt::format(
            "<p>{} of {} sequences, {} bp{}.</p>\n", grouped(static_cast<int64_t>(foreign.size())),
            grouped(static_cast<int64_t>(in.contigs->size())), grouped(bases),
            foreign.size() > max_rows
                ? fmt::format("; the first {} listed, the summary lists all", max_rows)
                : std::string());
        out +=
            "<div class=\"wide\"><table>\n<tr><th>#</th><th>sequence</th><th>length "
            "(bp)</th><th>known (bp)</th><th>GC</th><th>P(atypical)</th>";
        if (screened) out += "<th>signature distance</th><th>limit</th>";
        for (const int r : reported)
            out += fmt::format(
                "<th><b class=\"sw\" style=\"color:{}\">\u25a0</b>{}<br>expected "
                "%</th>",
                rgb(model, r), esc(model.region_names[static_cast<size_t>(r)]));
        out += "</tr>\n";
        for (size_t i = 0; i < foreign.size() && i < max_rows; ++i) {
            const ContigSummary& c = *foreign[i];
            const auto known = static_cast<double>(c.composition.known());
            out += fmt::format(
                "<tr class=\"num\"><td>{}</td><td class=\"txt\">{}</td><td>{}</td><td>{}</td>"
                "<td>{}</td><td>{}</td>",
                c.input_index + 1, esc(c.name), grouped(c.length), grouped(c.composition.known()),
                num(c.composition.gc_fraction(), 4),
                num(ForeignContigRule::atypical_fraction(model, c), 4));
            if (screened)
                out += std::isnan(c.composition_distance)
                           ? std::string("<td>\u2013</td><td>\u2013</td>")
                           : fmt::format("<td>{}</td><td>{}</td>", num(c.composition_distance, 1),
                                         num(c.composition_limit, 1));
            for (const int r : reported) {
                const auto ri = static_cast<size_t>(r);
                const double e = ri < c.expected_bases.size() ? c.expected_bases[ri] : 0.0;
                out += fmt::format("<td>{}</td>", num(100.0 * e / known, 3));
            }
            out += "</tr>\n";
        }
        out += "</table></div>\n</section>\n";
    }

    // The shown sequences longest first (ties: input order): on a draft the figure and the
    // table start with the contigs that hold most of the assembly.
    std::vector<const SequenceSketch*> by_length() const {
        std::vector<const SequenceSketch*> order;
        for (const auto& s : in.sketch->shown()) order.push_back(&s);
        std::stable_sort(order.begin(), order.end(),
                         [](const auto* a, const auto* b) { return a->length > b->length; });
        return order;
    }

    // N50 and L50 of the run's sequences: the length L of the sequence that brings the running
    // sum, longest first, to half the total, and how many sequences that takes.
    std::pair<int64_t, int64_t> n50() const {
        std::vector<int64_t> lengths;
        int64_t total = 0;
        for (const auto& c : *in.contigs) {
            lengths.push_back(c.length);
            total += c.length;
        }
        std::sort(lengths.rbegin(), lengths.rend());
        int64_t sum = 0;
        for (size_t i = 0; i < lengths.size(); ++i) {
            sum += lengths[i];
            if (2 * sum >= total) return {lengths[i], static_cast<int64_t>(i + 1)};
        }
        return {0, 0};
    }

    void along_section() {
        const auto shown = by_length();
        const int64_t seen = in.sketch->sequences_seen();
        const size_t R = reported.size();
        out += "<section id=\"along\">\n<h2>Calls along the sequences</h2>\n";
        int64_t shown_bases = 0, all_bases = 0, longest = 1;
        for (const auto* s : shown) {
            shown_bases += s->length;
            longest = std::max(longest, s->length);
        }
        for (const auto& c : *in.contigs) all_bases += c.length;
        if (static_cast<int64_t>(shown.size()) < seen)
            out += fmt::format(
                "<p class=\"note\">The {} longest of {} sequences ({:.1f} % of the bases), "
                "longest first, drawn to one scale. The summary (<code>--summary</code>) lists "
                "every sequence.</p>\n",
                grouped(static_cast<int64_t>(shown.size())), grouped(seen),
                all_bases
                    ? 100.0 * static_cast<double>(shown_bases) / static_cast<double>(all_bases)
                    : 0.0);
        else
            out += seen == 1 ? std::string("<p class=\"note\">The one sequence of the run.</p>\n")
                             : fmt::format(
                                   "<p class=\"note\">All {} sequences, longest first, drawn to "
                                   "one scale.</p>\n",
                                   grouped(seen));
        if (shown.empty()) {
            out += "<p>No sequence to draw.</p>\n</section>\n";
            return;
        }
        bool any_unknown = false;
        for (const auto* s : shown)
            for (const float u : s->unknown) any_unknown |= u > 0;
        legend(any_unknown);
        const size_t n = shown.size();
        const double area = n <= 3    ? 64
                            : n <= 12 ? 40
                            : n <= 50 ? 22
                                      : 10;  // posterior band height (always P 0 to 1)
        const double strip = n <= 12 ? 8 : n <= 50 ? 6 : 3;  // call strip height
        const double gap = n <= 12 ? 16 : n <= 50 ? 8 : 4;
        const double label_w = 210, track_w = 860, top = 34, row_h = area + strip + gap + 2;
        const double width = label_w + track_w + 30,
                     height = top + row_h * static_cast<double>(n) + 6;
        const double scale = track_w / static_cast<double>(longest);
        out += fmt::format(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{0}\" height=\"{1}\" viewBox=\"0 0 "
            "{0} {1}\" "
            "role=\"img\" aria-label=\"calls and posteriors along each sequence\">\n",
            px(width), px(height));
        // Axis: positions on the scale of the longest sequence, grid lines through all rows.
        const double step = nice_step(static_cast<double>(longest), 10);
        for (double v = 0; v <= static_cast<double>(longest) + 0.5; v += step) {
            const double x = label_w + v * scale;
            out += fmt::format(
                "<line x1=\"{0}\" y1=\"{1}\" x2=\"{0}\" y2=\"{2}\" class=\"grid\"/>"
                "<text x=\"{0}\" y=\"{3}\" class=\"tick\" text-anchor=\"middle\">{4}</text>\n",
                px(x), px(top - 6), px(height - 4), px(top - 12), bases_label(v));
        }
        out += fmt::format(
            "<text x=\"{}\" y=\"{}\" class=\"tick\" text-anchor=\"end\">band height: P 1</text>\n",
            px(label_w - 18), px(top - 12));
        std::vector<std::string> colours;
        for (const int r : reported) colours.push_back(rgb(model, r));
        for (size_t i = 0; i < n; ++i) {
            const SequenceSketch& s = *shown[i];
            const double y = top + row_h * static_cast<double>(i);
            const double w = static_cast<double>(s.length) * scale;
            const std::string where = s.offset ? fmt::format(" ({}\u2013{})", grouped(s.offset + 1),
                                                             grouped(s.offset + s.length))
                                               : "";
            out += fmt::format("<g><title>{}{}: {} bp</title>\n", esc(s.name), where,
                               grouped(s.length));
            // The label, shortened in the middle; the row's title holds the full name on hover.
            out += fmt::format(
                "<text x=\"{}\" y=\"{}\" class=\"lab\" text-anchor=\"end\">{}</text>\n",
                px(label_w - 8), px(y + area * 0.5 + strip * 0.5 + 4), esc(shortened(s.name, 30)));
            if (n <= 50)
                out += fmt::format(
                    "<text x=\"{}\" y=\"{}\" class=\"sub\" text-anchor=\"end\">{}</text>\n",
                    px(label_w - 8), px(y + area * 0.5 + strip * 0.5 + 16),
                    s.offset ? fmt::format("{}\u2013{}", grouped(s.offset + 1),
                                           grouped(s.offset + s.length))
                             : bases_label(static_cast<double>(s.length)));
            // Background of the posterior band and the sequence bar.
            out +=
                fmt::format("<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" class=\"band\"/>\n",
                            px(label_w), px(y), px(std::max(w, 0.5)), px(area));
            out +=
                fmt::format("<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" class=\"seq\"/>\n",
                            px(label_w), px(y + area + 1), px(std::max(w, 0.5)), px(strip));
            // Bins merged so that each drawn bin is at least one pixel wide; the posterior of a
            // merged bin is the mean over its known bases.
            const auto bins = static_cast<int64_t>(s.unknown.size());
            const int64_t group = std::max<int64_t>(
                1, static_cast<int64_t>(std::ceil(static_cast<double>(bins) / std::max(w, 1.0))));
            std::vector<double> xs;
            std::vector<std::vector<double>> layer(R);
            std::vector<std::vector<char>> hit(R);
            std::vector<double> unknown;
            std::vector<char> drawable;
            for (int64_t b = 0; b < bins; b += group) {
                const int64_t e = std::min(bins, b + group);
                xs.push_back(label_w + static_cast<double>(b * s.bin) * scale);
                double weight = 0, u = 0, known = 0;
                std::vector<double> sums(R, 0.0);
                std::vector<char> called(R, 0);
                for (int64_t j = b; j < e; ++j) {
                    const auto ju = static_cast<size_t>(j);
                    const double bw =
                        static_cast<double>(std::min((j + 1) * s.bin, s.length) - j * s.bin);
                    weight += bw;
                    u += s.unknown[ju] * bw;
                    const double kw = bw * (1.0 - s.unknown[ju]);
                    for (size_t k = 0; k < R; ++k) {
                        called[k] |= static_cast<char>(s.called[ju * R + k]);
                        if (kw > 0 && std::isfinite(s.posterior[ju * R + k]))
                            sums[k] += s.posterior[ju * R + k] * kw;
                    }
                    if (kw > 0 && std::isfinite(s.posterior[ju * R])) known += kw;
                }
                unknown.push_back(u / weight);
                drawable.push_back(u / weight < 0.5 && known > 0);
                for (size_t k = 0; k < R; ++k) {
                    layer[k].push_back(known > 0 ? sums[k] / known : 0.0);
                    hit[k].push_back(called[k]);
                }
            }
            xs.push_back(label_w + w);
            out += stacked_areas(xs, layer, drawable, y, area, colours);
            // Unknown stretches (at least half unknown): grey over both bands, nothing else.
            for (size_t j = 0; j < unknown.size();) {
                if (unknown[j] < 0.5) {
                    ++j;
                    continue;
                }
                size_t e = j;
                while (e < unknown.size() && unknown[e] >= 0.5) ++e;
                out += fmt::format(
                    "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" class=\"unk\"/>\n",
                    px(xs[j]), px(y), px(std::max(xs[e] - xs[j], 0.6)), px(area + strip + 1));
                j = e;
            }
            // Calls: runs of drawn bins touched by a call, at least 1.2 px wide so single
            // calls stay visible on long sequences.
            for (size_t k = 0; k < R; ++k)
                for (size_t j = 0; j < hit[k].size();) {
                    if (!hit[k][j]) {
                        ++j;
                        continue;
                    }
                    size_t e = j;
                    while (e < hit[k].size() && hit[k][e]) ++e;
                    out += fmt::format(
                        "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"{}\"/>\n",
                        px(xs[j]), px(y + area + 1), px(std::max(xs[e] - xs[j], 1.2)), px(strip),
                        rgb(model, reported[k]));
                    j = e;
                }
            out += "</g>\n";
        }
        out += "</svg>\n";
        int64_t bin = 1;
        for (const auto* s : shown)
            if (s->length == longest) bin = s->bin;
        out += fmt::format(
            "<p class=\"note\">Upper band: the mean posterior of each region type over the known "
            "bases of each bin (stacked; full height = P 1), that is the expected fraction of "
            "those bases in the region. Lower strip: where the calls are (every call is drawn at "
            "least one pixel wide); grey: unknown bases (assembly gaps), where nothing is "
            "drawn. Bins of {} on the longest sequence.</p>\n</section>\n",
            bin == 1 ? "1 base" : grouped(bin) + " bases");
    }

    // A stacked bar chart of counts per category for each reported region.
    void bar_chart(const std::string& title, const std::string& xlabel,
                   const std::vector<std::string>& labels,
                   const std::vector<std::vector<int64_t>>& counts, size_t label_every) {
        const double W = 540, H = 270, left = 58, right = 26, top = 30, bottom = 52;
        const size_t n = labels.size() - 1;  // labels are bin edges
        int64_t highest = 1;
        for (size_t i = 0; i < n; ++i) {
            int64_t stack = 0;
            for (const auto& c : counts) stack += c[i];
            highest = std::max(highest, stack);
        }
        const double ystep =
            std::max(1.0, nice_step(static_cast<double>(highest), 5));  // counts: whole numbers
        const double ymax = std::ceil(static_cast<double>(highest) / ystep) * ystep;
        const double pw = W - left - right, ph = H - top - bottom, bw = pw / static_cast<double>(n);
        out += fmt::format(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{0}\" height=\"{1}\" viewBox=\"0 0 "
            "{0} {1}\" "
            "role=\"img\" aria-label=\"{2}\">\n<text x=\"{3}\" y=\"18\" class=\"ttl\">{2}</text>\n",
            px(W), px(H), esc(title), px(left));
        for (double v = 0; v <= ymax + 0.5; v += ystep) {
            const double y = top + ph * (1 - v / ymax);
            out += fmt::format(
                "<line x1=\"{0}\" y1=\"{1}\" x2=\"{2}\" y2=\"{1}\" class=\"grid\"/><text x=\"{3}\" "
                "y=\"{4}\" "
                "class=\"tick\" text-anchor=\"end\">{5}</text>\n",
                px(left), px(y), px(W - right), px(left - 6), px(y + 4),
                grouped(static_cast<int64_t>(v)));
        }
        for (size_t i = 0; i < n; ++i) {
            double base = 0;
            for (size_t k = 0; k < counts.size(); ++k) {
                const auto c = static_cast<double>(counts[k][i]);
                if (c <= 0) continue;
                const double y1 = top + ph * (1 - (base + c) / ymax),
                             y0 = top + ph * (1 - base / ymax);
                out += fmt::format(
                    "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" "
                    "fill=\"{}\"><title>{}\u2013{}: {} "
                    "{}</title></rect>\n",
                    px(left + bw * static_cast<double>(i) + 1), px(y1), px(std::max(bw - 2, 1.0)),
                    px(y0 - y1), rgb(model, reported[k]), esc(labels[i]), esc(labels[i + 1]),
                    grouped(counts[k][i]),
                    esc(model.region_names[static_cast<size_t>(reported[k])]));
                base += c;
            }
        }
        for (size_t i = 0; i <= n; i += label_every)
            out += fmt::format(
                "<text x=\"{}\" y=\"{}\" class=\"tick\" text-anchor=\"middle\">{}</text>\n",
                px(left + bw * static_cast<double>(i)), px(top + ph + 16), esc(labels[i]));
        out += fmt::format("<line x1=\"{0}\" y1=\"{1}\" x2=\"{2}\" y2=\"{1}\" class=\"axis\"/>\n",
                           px(left), px(top + ph), px(W - right));
        out +=
            fmt::format("<text x=\"{}\" y=\"{}\" class=\"lab\" text-anchor=\"middle\">{}</text>\n",
                        px(left + pw / 2), px(H - 10), esc(xlabel));
        out += fmt::format(
            "<text transform=\"translate(14 {}) rotate(-90)\" class=\"lab\" "
            "text-anchor=\"middle\">calls</text>\n",
            px(top + ph / 2));
        out += "</svg>\n";
    }

    void distribution_section(const ContigSummary& g) {
        out += "<section id=\"calls\">\n<h2>Call length and confidence</h2>\n";
        int64_t total = 0, longest = 1;
        double lowest = 1;
        for (const int r : reported) {
            const auto ri = static_cast<size_t>(r);
            total += g.calls[ri];
            for (const int64_t l : g.call_lengths[ri]) longest = std::max(longest, l);
            for (const double c : g.call_confidences[ri]) lowest = std::min(lowest, c);
        }
        if (total == 0) {
            out += "<p>No calls.</p>\n</section>\n";
            return;
        }
        legend(false);
        out += "<div class=\"figs\">\n";
        // Lengths on the report's 1-2-5 scale, from the first to the last bin holding a call.
        const std::vector<double> edges = call_length_edges(longest);
        std::vector<std::vector<int64_t>> counts;
        for (const int r : reported)
            counts.push_back(histogram_counts(edges, g.call_lengths[static_cast<size_t>(r)]));
        size_t first = edges.size(), last = 0;
        for (const auto& c : counts)
            for (size_t i = 0; i < c.size(); ++i)
                if (c[i]) {
                    first = std::min(first, i);
                    last = std::max(last, i);
                }
        std::vector<std::string> labels;
        for (size_t i = first; i <= last + 1; ++i) labels.push_back(bases_label(edges[i]));
        for (auto& c : counts)
            c = std::vector<int64_t>(c.begin() + static_cast<std::ptrdiff_t>(first),
                                     c.begin() + static_cast<std::ptrdiff_t>(last) + 1);
        bar_chart("call length (bins on a 1-2-5 scale)", "call length (bp)", labels, counts,
                  labels.size() > 16 ? 3 : 1);
        // Confidence in steps of 0.05 from 0.5 (or the lowest call) to 1.
        const std::vector<double> cedges = confidence_edges();
        const size_t from = std::min<size_t>(10, static_cast<size_t>(std::floor(lowest * 20)));
        counts.clear();
        for (const int r : reported) {
            const auto all = histogram_counts(cedges, g.call_confidences[static_cast<size_t>(r)]);
            counts.emplace_back(all.begin() + static_cast<std::ptrdiff_t>(from), all.end());
        }
        labels.clear();
        for (size_t i = from; i < cedges.size(); ++i) labels.push_back(num(cedges[i], 2));
        bar_chart("call confidence (mean posterior of the call)", "mean posterior", labels, counts,
                  2);
        out += "</div>\n</section>\n";
    }

    // One step line of per-point values over [lo, hi] in a strip of the window figure, broken
    // where a point is not drawn (a gap) or has no value; with its axis labels and optional
    // reference line.
    void value_strip(const std::vector<double>& xs, const std::vector<float>& values,
                     const std::vector<char>& drawable, double y0, double h, double lo, double hi,
                     const std::string& label, double reference, const std::string& ref_title,
                     double left, double right_x) {
        const auto y = [&](double v) {
            return y0 + h * (1 - std::clamp((v - lo) / (hi - lo), 0.0, 1.0));
        };
        out += fmt::format("<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" class=\"band\"/>\n",
                           px(left), px(y0), px(right_x - left), px(h));
        if (std::isfinite(reference) && reference > lo && reference < hi)
            out += fmt::format(
                "<line x1=\"{0}\" y1=\"{1}\" x2=\"{2}\" y2=\"{1}\" class=\"thr\"><title>{3}</title>"
                "</line>\n",
                px(left), px(y(reference)), px(right_x), esc(ref_title));
        std::string d;
        bool open = false;
        for (size_t i = 0; i < values.size(); ++i) {
            if (!drawable[i] || !std::isfinite(values[i])) {
                open = false;
                continue;
            }
            const std::string yi = px(y(values[i]));
            d += (open ? "V" : "M" + px(xs[i]) + " ") + yi + "H" + px(xs[i + 1]);
            open = true;
        }
        if (!d.empty()) out += "<path d=\"" + d + "\" class=\"trace\"/>\n";
        out += fmt::format(
            "<text x=\"{0}\" y=\"{1}\" class=\"tick\" text-anchor=\"end\">{2}</text>"
            "<text x=\"{0}\" y=\"{3}\" class=\"tick\" text-anchor=\"end\">{4}</text>"
            "<text x=\"{5}\" y=\"{6}\" class=\"sub\">{7}</text>\n",
            px(left - 5), px(y0 + 8), num(hi, 1), px(y0 + h), num(lo, 1), px(right_x + 4),
            px(y0 + h / 2 + 4), esc(label));
    }

    void window_figure(const CallWindow& w, size_t rank) {
        const bool cpg = cpg_profile();
        const double W = 520, left = 44, right = 40, top = 40, ph = 104, strip_y = top + ph + 8,
                     sub_h = 40, gc_y = strip_y + 22, oe_y = gc_y + sub_h + 8,
                     axis_y = (cpg ? oe_y : gc_y) + sub_h + 4, H = axis_y + 26;
        const double pw = W - left - right;
        const size_t R = reported.size();
        const Call& c = w.call;
        const auto xpos = [&](int64_t p) {
            return left + pw * static_cast<double>(p - w.begin) /
                              static_cast<double>(std::max<int64_t>(1, w.end - w.begin));
        };
        const std::string region = model.region_names[static_cast<size_t>(c.region)];
        out += fmt::format(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{0}\" height=\"{1}\" viewBox=\"0 0 "
            "{0} {1}\" "
            "role=\"img\" aria-label=\"posterior around call {2}\">\n",
            px(W), px(H), rank);
        out += fmt::format(
            "<g><title>{}</title><text x=\"{}\" y=\"16\" class=\"ttl\">{}. "
            "{}:{}\u2013{}</text></g>\n",
            esc(w.name), px(left), rank, esc(shortened(w.name, 40)),
            grouped(w.offset + c.begin + 1), grouped(w.offset + c.end));
        out += fmt::format(
            "<text x=\"{}\" y=\"31\" class=\"sub\">{} \u00b7 {} bp \u00b7 mean P {} \u00b7 "
            "GC {}{}</text>\n",
            px(left), esc(region), grouped(c.end - c.begin), num(c.mean_posterior, 4),
            num(c.composition.gc_fraction(), 3),
            cpg ? " \u00b7 CpG o/e " + num(c.composition.cpg_obs_exp(), 2) : std::string());
        // Axes and the calling threshold.
        for (const double v : {0.0, 0.5, 1.0}) {
            const double y = top + ph * (1 - v);
            out += fmt::format(
                "<line x1=\"{0}\" y1=\"{1}\" x2=\"{2}\" y2=\"{1}\" class=\"grid\"/><text x=\"{3}\" "
                "y=\"{4}\" "
                "class=\"tick\" text-anchor=\"end\">{5}</text>\n",
                px(left), px(y), px(W - right), px(left - 5), px(y + 4), num(v, 1));
        }
        out += fmt::format("<text x=\"{}\" y=\"{}\" class=\"sub\">P</text>\n", px(W - right + 4),
                           px(top + ph / 2 + 4));
        // Stacked posterior of the reported regions, one step per point; nothing where a point
        // is mostly unknown bases.
        const size_t points = w.posterior.size() / std::max<size_t>(R, 1);
        std::vector<double> xs;
        for (size_t i = 0; i <= points; ++i)
            xs.push_back(xpos(std::min(w.end, w.begin + static_cast<int64_t>(i) * w.bin)));
        std::vector<char> drawable(points);
        for (size_t i = 0; i < points; ++i)
            drawable[i] = i >= w.unknown.size() || w.unknown[i] < 0.5;
        std::vector<std::vector<double>> layers(R, std::vector<double>(points));
        std::vector<std::string> colours;
        for (size_t k = 0; k < R; ++k) {
            for (size_t i = 0; i < points; ++i) layers[k][i] = w.posterior[i * R + k];
            colours.push_back(rgb(model, reported[k]));
        }
        out += stacked_areas(xs, layers, drawable, top, ph, colours, " fill-opacity=\"0.85\"");
        const double threshold_y = top + ph * (1 - in.calling->min_posterior);
        out += fmt::format(
            "<line x1=\"{0}\" y1=\"{1}\" x2=\"{2}\" y2=\"{1}\" class=\"thr\"><title>calling "
            "threshold "
            "P = {3}</title></line>\n",
            px(left), px(threshold_y), px(W - right), num(in.calling->min_posterior, 3));
        // Calls in the window: thin over their length, thick over their core.
        for (const Call& o : w.nearby) {
            const double x0 = xpos(std::max(o.begin, w.begin)), x1 = xpos(std::min(o.end, w.end));
            const bool focal = o.begin == c.begin && o.end == c.end && o.region == c.region;
            const std::string colour = rgb(model, o.region);
            out +=
                fmt::format("<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"4\" fill=\"{}\"{}/>\n",
                            px(x0), px(strip_y + 4), px(std::max(x1 - x0, 1.0)), colour,
                            focal ? "" : " fill-opacity=\"0.45\"");
            if (o.core_end > o.core_begin) {
                const double c0 = xpos(std::max(o.core_begin, w.begin)),
                             c1 = xpos(std::min(o.core_end, w.end));
                out += fmt::format(
                    "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"12\" fill=\"{}\"{}/>\n", px(c0),
                    px(strip_y), px(std::max(c1 - c0, 1.0)), colour,
                    focal ? "" : " fill-opacity=\"0.45\"");
            }
        }
        // The evidence under the posterior: GC of each point (and CpG o/e for CpG profiles),
        // on a scale that fits the window, with the Gardiner-Garden & Frommer (1987) island
        // thresholds as reference lines.
        double gc_lo = 1, gc_hi = 0, oe_hi = 1;
        for (size_t i = 0; i < points && i < w.gc.size(); ++i) {
            if (!drawable[i] || !std::isfinite(w.gc[i])) continue;
            gc_lo = std::min(gc_lo, static_cast<double>(w.gc[i]));
            gc_hi = std::max(gc_hi, static_cast<double>(w.gc[i]));
            if (std::isfinite(w.cpg_obs_exp[i]))
                oe_hi = std::max(oe_hi, static_cast<double>(w.cpg_obs_exp[i]));
        }
        if (gc_lo > gc_hi) gc_lo = 0, gc_hi = 1;
        gc_lo = std::floor(gc_lo * 10 - 1e-9) / 10;
        gc_hi = std::max(std::ceil(gc_hi * 10 + 1e-9) / 10, gc_lo + 0.1);
        gc_lo = std::max(gc_lo, 0.0), gc_hi = std::min(gc_hi, 1.0);
        value_strip(xs, w.gc, drawable, gc_y, sub_h, gc_lo, gc_hi, "GC",
                    cpg ? 0.5 : std::numeric_limits<double>::quiet_NaN(),
                    "GC 0.5 (Gardiner-Garden & Frommer 1987)", left, W - right);
        if (cpg)
            value_strip(xs, w.cpg_obs_exp, drawable, oe_y, sub_h, 0,
                        std::min(2.0, std::ceil(oe_hi * 5) / 5), "o/e", 0.6,
                        "CpG o/e 0.6 (Gardiner-Garden & Frommer 1987)", left, W - right);
        // Unknown stretches: grey from the posterior to the last strip.
        for (size_t j = 0; j < points;) {
            if (drawable[j]) {
                ++j;
                continue;
            }
            size_t e = j;
            while (e < points && !drawable[e]) ++e;
            out += fmt::format(
                "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" class=\"unk\"><title>unknown "
                "bases</title></rect>\n",
                px(xs[j]), px(top), px(std::max(xs[e] - xs[j], 0.6)), px(axis_y - top));
            j = e;
        }
        // Position ticks (1-based, as in region strings).
        const double span = static_cast<double>(w.end - w.begin);
        const double step = nice_step(span, 5);
        const double first = std::ceil(static_cast<double>(w.offset + w.begin) / step) * step;
        for (double v = first; v <= static_cast<double>(w.offset + w.end); v += step) {
            const double x = left + pw * (v - static_cast<double>(w.offset + w.begin)) / span;
            out += fmt::format(
                "<line x1=\"{0}\" y1=\"{1}\" x2=\"{0}\" y2=\"{2}\" class=\"axis\"/><text x=\"{0}\" "
                "y=\"{3}\" "
                "class=\"tick\" text-anchor=\"middle\">{4}</text>\n",
                px(x), px(axis_y), px(axis_y + 4), px(axis_y + 16),
                grouped(static_cast<int64_t>(v)));
        }
        out += "</svg>\n";
    }

    void windows_section() {
        const auto& windows = in.sketch->top_windows();
        const bool cpg = cpg_profile();
        out += "<section id=\"top\">\n<h2>Example calls: the posterior and its evidence</h2>\n";
        if (windows.empty()) {
            out += "<p>No calls.</p>\n</section>\n";
            return;
        }
        out += fmt::format(
            "<p class=\"note\">{} with the highest mean posterior (ties: the longer, then the "
            "earlier), from distinct loci: no two windows overlap, and calls with sequence on "
            "both sides come before calls that span their sequence. Each window shows at least "
            "1 kb on either side. Top: stacked posterior of the reported region types; dashed "
            "line: the calling threshold; below it the calls (thick = core, P &ge; {}); then the "
            "GC fraction{} per step, the evidence the profile reads{}; grey: unknown bases, "
            "where nothing is drawn. Positions are 1-based.</p>\n",
            windows.size() == 1 ? std::string("The call")
                                : fmt::format("The {} calls", windows.size()),
            num(in.calling->high_posterior, 2), cpg ? " and the CpG observed/expected ratio" : "",
            cpg ? " (dashed: GC 0.5 and o/e 0.6, the island thresholds of Gardiner-Garden &amp; "
                  "Frommer 1987, J. Mol. Biol. 196:261-282)"
                : "");
        legend(false);
        out += "<div class=\"figs\">\n";
        for (size_t i = 0; i < windows.size(); ++i) window_figure(windows[i], i + 1);
        out += "</div>\n";
        const int64_t bin = windows.front().bin;
        if (bin > 1)
            out += fmt::format(
                "<p class=\"note\">The posterior is averaged over {} bases per step in the first "
                "window (at most {} steps across a window).</p>\n",
                grouped(bin), 600);
        out += "</section>\n";
    }

    // One row of a table of calls.
    void call_row(const ListedCall& l, int64_t index, bool cpg, bool regions) {
        const Call& c = l.call;
        out += fmt::format(
            "<tr class=\"num\"><td>{}</td><td class=\"txt\"{}>{}</td><td>{}</td><td>{}</td>"
            "<td>{}</td>",
            index < 0 ? "" : grouped(index),
            l.name.size() > 24 ? " title=\"" + esc(l.name) + "\"" : "", esc(shortened(l.name, 24)),
            grouped(l.offset + c.begin + 1), grouped(l.offset + c.end), grouped(c.end - c.begin));
        if (regions)
            out += fmt::format(
                "<td class=\"txt\"><b class=\"sw\" style=\"color:{}\">\u25a0</b>{}</td>",
                rgb(model, c.region), esc(model.region_names[static_cast<size_t>(c.region)]));
        const int64_t core = c.core_end - c.core_begin;
        out += fmt::format("<td>{}</td><td>{}</td><td>{}</td>", num(c.mean_posterior, 4),
                           num(100.0 * static_cast<double>(core) /
                                   static_cast<double>(std::max<int64_t>(1, c.end - c.begin)),
                               1),
                           c.composition.known() ? num(c.composition.gc_fraction(), 3) : "NA");
        if (cpg) out += "<td>" + num(c.composition.cpg_obs_exp(), 3) + "</td>";
        if (model.signature_evidence) out += "<td>" + num(c.signature_distance, 4) + "</td>";
        out += "</tr>\n";
    }

    void calls_table(const std::vector<ListedCall>& calls, bool numbered) {
        const bool cpg = cpg_profile(), regions = reported.size() > 1;
        out +=
            "<table>\n<tr><th>#</th><th>sequence</th><th>start</th><th>end</th><th>length "
            "(bp)</th>";
        if (regions) out += "<th>region</th>";
        out += "<th>confidence</th><th>core %</th><th>GC</th>";
        if (cpg) out += "<th>CpG o/e</th>";
        if (model.signature_evidence)
            out +=
                "<th title=\"dinucleotide relative-abundance distance from the call's "
                "sequence, both strands (Karlin &amp; Burge 1995)\">signature \u03b4*</th>";
        out += "</tr>\n";
        int64_t i = 0;
        for (const auto& l : calls) call_row(l, numbered ? ++i : -1, cpg, regions);
        out += "</table>\n";
    }

    void calls_list_section() {
        const auto& listed = in.sketch->listed_calls();
        const int64_t all = in.sketch->calls_seen();
        const std::string bed = in.bed_path.empty() || in.bed_path == "-"
                                    ? std::string("the BED on standard output")
                                    : "<code>" + esc(in.bed_path) + "</code>";
        out += "<section id=\"list\">\n<h2>The calls</h2>\n";
        if (all == 0) {
            out += "<p>No calls.</p>\n</section>\n";
            return;
        }
        out += fmt::format(
            "<p class=\"note\">Positions are 1-based and inclusive (BED start + 1 to BED end). "
            "Confidence: the call's mean posterior; core %: the share of the call at P &ge; {}; "
            "GC{}: of the call's known bases{}.</p>\n",
            num(in.calling->high_posterior, 2), cpg_profile() ? " and CpG o/e" : "",
            in.profile->windowed() ? " (the evidence of a window profile is its windows' GC)" : "");
        const auto& confident = in.sketch->most_confident();
        const auto& longest = in.sketch->longest();
        // The two rankings only when they leave calls out (else they repeat the list below).
        if (static_cast<int64_t>(confident.size()) < all) {
            out += "<div class=\"figs\">\n<div>\n";
            out += fmt::format("<h3>The {} most confident</h3>\n", confident.size());
            calls_table(confident, true);
            out += "</div>\n<div>\n";
            out += fmt::format("<h3>The {} longest</h3>\n", longest.size());
            calls_table(longest, true);
            out += "</div>\n</div>\n";
        }
        out += fmt::format(
            "<h3 id=\"all-calls\">{} in position order</h3>\n",
            static_cast<int64_t>(listed.size()) == all
                ? (all == 1 ? std::string("The call") : fmt::format("All {} calls", grouped(all)))
                : fmt::format("The first {} of {} calls",
                              grouped(static_cast<int64_t>(listed.size())), grouped(all)));
        if (static_cast<int64_t>(listed.size()) < all)
            out += fmt::format(
                "<p class=\"note\"><b>{} more calls are not listed here</b>; all {} are in "
                "{}.</p>\n",
                grouped(all - static_cast<int64_t>(listed.size())), grouped(all), bed);
        out += "<div class=\"scroll\">\n";
        calls_table(listed, true);
        out += "</div>\n</section>\n";
    }

    void sequences_section(const ContigSummary& g) {
        const auto& shown = in.sketch->shown();
        const auto& contigs = *in.contigs;
        out += "<section id=\"sequences\">\n<h2>Sequences</h2>\n";
        if (shown.size() < contigs.size())
            out += fmt::format(
                "<p class=\"note\">The {} sequences of the figure above, longest first (#: place "
                "in the input); the summary lists all {}.</p>\n",
                grouped(static_cast<int64_t>(shown.size())),
                grouped(static_cast<int64_t>(contigs.size())));
        // Wide tables (profiles with many reported regions) scroll instead of overflowing.
        out +=
            "<div class=\"wide\"><table>\n<tr><th>#</th><th>sequence</th><th>length (bp)</th>"
            "<th>unknown</th><th>GC</th><th>CpG o/e</th><th>log-likelihood</th>";
        for (const int r : reported)
            out += fmt::format(
                "<th><b class=\"sw\" style=\"color:{}\">\u25a0</b>{}<br>expected %</th>"
                "<th>{}<br>calls</th>",
                rgb(model, r), esc(model.region_names[static_cast<size_t>(r)]),
                esc(model.region_names[static_cast<size_t>(r)]));
        out += "</tr>\n";
        const auto row = [&](const ContigSummary& c, const std::string& index, bool total) {
            // Shares of known bases, as in the summary (see the genome-wide table).
            const double len =
                c.composition.known() > 0 ? static_cast<double>(c.composition.known()) : 1.0;
            std::string name = esc(c.name);
            if (c.offset)
                name += fmt::format(" <span class=\"dim\">{}\u2013{}</span>", grouped(c.offset + 1),
                                    grouped(c.offset + c.length));
            out += fmt::format(
                "<tr class=\"num{}\"><td>{}</td><td "
                "class=\"txt\">{}</td><td>{}</td><td>{}</td><td>{}</td>"
                "<td>{}</td><td>{}</td>",
                total ? " total" : "", index, total ? "all sequences" : name, grouped(c.length),
                grouped(c.unknown),
                c.composition.known() ? num(c.composition.gc_fraction(), 4) : "NA",
                num(c.composition.cpg_obs_exp(), 3), num(c.log_likelihood, 2));
            for (const int r : reported) {
                const auto ri = static_cast<size_t>(r);
                const double e = ri < c.expected_bases.size() ? c.expected_bases[ri] : 0.0;
                out += fmt::format("<td>{}</td><td>{}</td>", num(100.0 * e / len, 3),
                                   grouped(ri < c.calls.size() ? c.calls[ri] : 0));
            }
            out += "</tr>\n";
        };
        for (const auto* s : by_length())
            if (static_cast<size_t>(s->ordinal) < contigs.size())
                row(contigs[static_cast<size_t>(s->ordinal)], std::to_string(s->ordinal + 1),
                    false);
        row(g, "", true);
        out += "</table></div>\n</section>\n";
    }
};

}  // namespace

std::string format_html_report(const HtmlReportInput& in) {
    if (!in.info || !in.profile || !in.model || !in.calling || !in.contigs || !in.sketch)
        throw InternalError("format_html_report: missing input");
    const Model& model = *in.model;
    Page page{in, model, in.sketch->reported_regions(), {}};
    std::string& out = page.out;
    const ContigSummary g = genome_total(model, *in.contigs);
    std::string inputs;
    for (const auto& f : in.info->inputs)
        inputs += (inputs.empty() ? "" : ", ") + (f == "-" ? std::string("stdin") : f);
    out +=
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        // No scripts, no requests: the page is only text, styles and inline SVG.
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src "
        "'unsafe-inline'\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n";
    out += "<title>tidemark report: " + esc(in.profile->name) + " on " + esc(inputs) + "</title>\n";
    out += "<style>" + std::string(style_sheet) +
           "</style>\n</head>\n<body>\n<main>\n<header>\n<h1>tidemark report</h1>\n";
    int64_t calls = 0;
    for (const int r : page.reported) calls += g.calls[static_cast<size_t>(r)];
    out += fmt::format(
        "<p class=\"lead\">Profile <b>{}</b> on <b>{}</b>: {} sequence{}, {} bp, {} "
        "call{}.</p>\n</header>\n",
        esc(in.profile->name), esc(inputs), grouped(static_cast<int64_t>(in.contigs->size())),
        in.contigs->size() == 1 ? "" : "s", grouped(g.length), grouped(calls),
        calls == 1 ? "" : "s");
    page.warnings_box();
    page.run_section();
    page.genome_section(g);
    page.foreign_section();
    page.along_section();
    page.windows_section();
    page.calls_list_section();
    page.distribution_section(g);
    page.sequences_section(g);
    out += "<footer>Written by tidemark " TIDEMARK_VERSION
           " (scan --html). Calls and probabilities are predictions from a statistical model, for "
           "research "
           "use. The same numbers are in <code>--summary</code> and "
           "<code>--report</code>.</footer>\n</main>\n"
           "</body>\n</html>\n";
    return out;
}

}  // namespace tidemark
