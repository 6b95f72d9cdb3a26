// Scan summary: region totals while decoding, then JSON and table rendering.
#include "tidemark/summary.hpp"

#include <fmt/format.h>

#include <cmath>
#include <nlohmann/json.hpp>

namespace tidemark {
namespace {

using ordered_json = nlohmann::ordered_json;

ContigSummary genome_total(const Model& model, const std::vector<ContigSummary>& contigs) {
    ContigSummary total;
    total.name = "*";
    total.expected_bases.assign(model.region_names.size(), 0.0);
    total.called_bases.assign(model.region_names.size(), 0);
    total.calls.assign(model.region_names.size(), 0);
    for (const auto& c : contigs) {
        total.length += c.length;
        total.unknown += c.unknown;
        total.soft_masked += c.soft_masked;
        total.log_likelihood += c.log_likelihood;
        total.composition.a += c.composition.a;
        total.composition.c += c.composition.c;
        total.composition.g += c.composition.g;
        total.composition.t += c.composition.t;
        total.composition.unknown += c.composition.unknown;
        total.composition.cpg += c.composition.cpg;
        for (size_t r = 0; r < total.calls.size() && r < c.calls.size(); ++r) {
            total.expected_bases[r] += c.expected_bases[r];
            total.called_bases[r] += c.called_bases[r];
            total.calls[r] += c.calls[r];
        }
    }
    return total;
}

ordered_json number_or_null(double x) { return std::isfinite(x) ? ordered_json(x) : ordered_json(nullptr); }

ordered_json contig_json(const Model& model, const ContigSummary& c) {
    ordered_json o;
    o["name"] = c.name;
    if (c.offset) o["offset"] = c.offset;
    o["length"] = c.length;
    o["unknown_bases"] = c.unknown;
    o["soft_masked_bases"] = c.soft_masked;
    o["gc_fraction"] = c.composition.gc_fraction();
    o["cpg_obs_exp"] = number_or_null(c.composition.cpg_obs_exp());
    o["log_likelihood"] = c.log_likelihood;
    ordered_json regions = ordered_json::object();
    for (size_t r = 0; r < model.region_names.size(); ++r) {
        ordered_json x;
        x["expected_bases"] = c.expected_bases.empty() ? 0.0 : c.expected_bases[r];
        x["expected_fraction"] =
            c.length > 0 && !c.expected_bases.empty() ? c.expected_bases[r] / static_cast<double>(c.length) : 0.0;
        x["reported"] = static_cast<bool>(model.region_report[r]);
        if (model.region_report[r]) {
            x["calls"] = c.calls.empty() ? 0 : c.calls[r];
            x["called_bases"] = c.called_bases.empty() ? 0 : c.called_bases[r];
        }
        regions[model.region_names[r]] = x;
    }
    o["regions"] = regions;
    return o;
}

}  // namespace

void RegionTotals::begin_contig(const Contig&) {
    expected_.assign(model_.region_names.size(), 0.0);
}

void RegionTotals::block(const BlockView& view) {
    const int S = view.states;
    // Per-state column sums first, then regions: fewer indirections in the loop.
    std::vector<double> by_state(S, 0.0);
    for (int64_t t = 0; t < view.size; ++t)
        for (int s = 0; s < S; ++s) by_state[s] += view.posterior[t * S + s];
    for (int s = 0; s < S; ++s) expected_[model_.region_of_state[s]] += by_state[s];
}

std::string summary_json(const RunInfo& info, const Model& model,
                         const std::vector<ContigSummary>& contigs) {
    ordered_json doc;
    doc["format"] = "tidemark-summary/1";
    doc["tool_version"] = TIDEMARK_VERSION;
    doc["command"] = info.command_line;
    doc["inputs"] = info.inputs;
    doc["profile"] = info.profile_name;
    doc["decode"] = info.decode_mode;
    doc["genome"] = contig_json(model, genome_total(model, contigs));
    doc["genome"].erase("name");
    doc["genome"]["contigs"] = contigs.size();
    ordered_json list = ordered_json::array();
    for (const auto& c : contigs) list.push_back(contig_json(model, c));
    doc["contigs"] = list;
    return doc.dump(2) + "\n";
}

std::string summary_table(const Model& model, const std::vector<ContigSummary>& contigs) {
    std::string out = fmt::format("{:<24} {:>12} {:>10} {:>7} {:>16}", "contig", "length", "unknown",
                                  "GC", "log_likelihood");
    for (size_t r = 0; r < model.region_names.size(); ++r)
        if (model.region_report[r])
            out += fmt::format(" {:>14} {:>7}", model.region_names[r] + "%", "calls");
    out += '\n';
    std::vector<ContigSummary> rows = contigs;
    rows.push_back(genome_total(model, contigs));
    rows.back().name = "(all)";
    for (const auto& c : rows) {
        out += fmt::format("{:<24} {:>12} {:>10} {:>7.4f} {:>16.4f}", c.name, c.length, c.unknown,
                           c.composition.gc_fraction(), c.log_likelihood);
        for (size_t r = 0; r < model.region_names.size(); ++r)
            if (model.region_report[r]) {
                const double frac = c.length > 0 && !c.expected_bases.empty()
                                        ? 100.0 * c.expected_bases[r] / static_cast<double>(c.length)
                                        : 0.0;
                out += fmt::format(" {:>14.4f} {:>7}", frac, c.calls.empty() ? 0 : c.calls[r]);
            }
        out += '\n';
    }
    return out;
}

}  // namespace tidemark
