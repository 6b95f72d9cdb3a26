// Scan summary and run report: region totals while decoding, then JSON and table rendering.
#include "tidemark/summary.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <nlohmann/json.hpp>

#include "summary_internal.hpp"
#include "tidemark/contig_screen.hpp"
#include "tidemark/error.hpp"

namespace tidemark {

using ordered_json = nlohmann::ordered_json;

ordered_json run_options_json(const RunOptions& o) {
    ordered_json j;
    j["profile"] = o.profile;
    j["decode"] = o.decode;
    j["regions"] = o.regions;
    j["regions_bed"] = o.regions_bed;
    j["min_posterior"] = o.calling.min_posterior;
    j["merge_gap"] = o.calling.merge_gap;
    j["min_length"] = o.calling.min_length;
    j["core_posterior"] = o.calling.high_posterior;
    const char* criteria[] = {"none", "ggf1987", "tj2002"};
    j["island_criteria"] = criteria[static_cast<int>(o.calling.criteria)];
    j["bed_style"] = o.bed_style == BedStyle::plain ? "plain" : "browser";
    j["bgzip"] = o.bgzip;
    j["posteriors"] = o.posteriors;
    j["posterior_digits"] = o.posterior_digits;
    j["bin"] = o.bin;
    j["track_format"] = o.track_format == TrackFormat::bedgraph ? "bedgraph" : "bigwig";
    j["block"] = o.block;
    if (o.soft_masked_unknown) j["soft_masked"] = "unknown";  // absent: as before (base)
    return j;
}

RunOptions run_options_from_json(const nlohmann::json& j, const std::string& where) {
    RunOptions o;
    try {
        // The calling options are needed to call split records; the others have their defaults.
        o.profile = j.value("profile", "");
        o.decode = j.value("decode", o.decode);
        o.regions = j.value("regions", o.regions);
        o.regions_bed = j.value("regions_bed", o.regions_bed);
        o.calling.min_posterior = j.at("min_posterior").get<double>();
        o.calling.merge_gap = j.at("merge_gap").get<int64_t>();
        o.calling.min_length = j.at("min_length").get<int64_t>();
        o.calling.high_posterior = j.at("core_posterior").get<double>();
        o.calling.criteria = parse_island_criteria(j.at("island_criteria").get<std::string>());
        o.bed_style =
            j.at("bed_style").get<std::string>() == "browser" ? BedStyle::browser : BedStyle::plain;
        o.bgzip = j.value("bgzip", o.bgzip);
        o.posteriors = j.value("posteriors", o.posteriors);
        o.posterior_digits = j.value("posterior_digits", o.posterior_digits);
        o.bin = j.value("bin", o.bin);
        o.track_format = j.value("track_format", "bedgraph") == "bigwig" ? TrackFormat::bigwig
                                                                         : TrackFormat::bedgraph;
        o.block = j.value("block", o.block);
        o.soft_masked_unknown = j.value("soft_masked", "base") == "unknown";
    } catch (const nlohmann::json::exception& e) {
        throw InputError(fmt::format("{}: malformed 'options': {}", where, e.what()));
    }
    return o;
}

namespace {

// Adds one contig to genome-wide totals sized for R regions.
void add_to_total(ContigSummary& total, const ContigSummary& c, size_t R) {
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
    for (size_t r = 0; r < R; ++r) {
        if (r < c.expected_bases.size()) total.expected_bases[r] += c.expected_bases[r];
        if (r < c.calls.size()) {
            total.called_bases[r] += c.called_bases[r];
            total.calls[r] += c.calls[r];
            total.confidence_sum[r] += c.confidence_sum[r];
            total.call_lengths[r].insert(total.call_lengths[r].end(), c.call_lengths[r].begin(),
                                         c.call_lengths[r].end());
            total.call_confidences[r].insert(total.call_confidences[r].end(),
                                             c.call_confidences[r].begin(),
                                             c.call_confidences[r].end());
        }
    }
}

ContigSummary empty_total(size_t R) {
    ContigSummary total;
    total.name = "(all)";
    total.reset_calls(R);
    return total;
}

}  // namespace

ContigSummary genome_total(const Model& model, const std::vector<ContigSummary>& contigs) {
    const size_t R = model.region_names.size();
    ContigSummary total = empty_total(R);
    for (const auto& c : contigs) add_to_total(total, c, R);
    return total;
}

namespace {

ordered_json number_or_null(double x) {
    return std::isfinite(x) ? ordered_json(x) : ordered_json(nullptr);
}

}  // namespace

LengthStats length_stats(std::vector<int64_t> lengths) {
    LengthStats s;
    if (lengths.empty()) return s;
    std::sort(lengths.begin(), lengths.end());
    const size_t n = lengths.size();
    s.min = lengths.front();
    s.max = lengths.back();
    // Median of an even count: mean of the two middle values (common practice).
    s.median = n % 2 ? static_cast<double>(lengths[n / 2])
                     : 0.5 * static_cast<double>(lengths[n / 2 - 1] + lengths[n / 2]);
    return s;
}

namespace {

ordered_json length_distribution(const std::vector<int64_t>& lengths) {
    if (lengths.empty()) return nullptr;
    const LengthStats s = length_stats(lengths);
    return {{"min", s.min}, {"median", s.median}, {"max", s.max}};
}

// Counts of values v with edges[i] <= v < edges[i+1] (the last bin includes its upper edge).
template <typename T>
std::vector<int64_t> counts_in(const std::vector<double>& edges, const std::vector<T>& values) {
    std::vector<int64_t> counts(edges.size() - 1, 0);
    for (const T v : values) {
        const auto x = static_cast<double>(v);
        auto it = std::upper_bound(edges.begin(), edges.end(), x);
        size_t bin = it == edges.begin() ? 0 : static_cast<size_t>(it - edges.begin()) - 1;
        counts[std::min(bin, counts.size() - 1)]++;
    }
    return counts;
}

template <typename T>
ordered_json histogram(const std::vector<double>& edges, const std::vector<T>& values) {
    return {{"edges", edges}, {"counts", counts_in(edges, values)}};
}

ordered_json call_histograms(const ContigSummary& g, size_t r) {
    int64_t longest = 1;
    for (const int64_t l : g.call_lengths[r]) longest = std::max(longest, l);
    return {{"call_length_histogram", histogram(call_length_edges(longest), g.call_lengths[r])},
            {"confidence_histogram", histogram(confidence_edges(), g.call_confidences[r])}};
}

// Bases as a share of the contig's known bases (0 when none is known): calls and expected bases
// count known bases only, so unknown stretches do not dilute the shares.
double known_share(double bases, const ContigSummary& c) {
    const int64_t known = c.composition.known();
    return known > 0 ? bases / static_cast<double>(known) : 0.0;
}

ordered_json contig_json(const Model& model, const ContigSummary& c, bool report, bool masked) {
    ordered_json o;
    o["name"] = c.name;
    o["input_index"] = c.input_index;  // lets merge restore input order from shard outputs
    if (c.offset) o["offset"] = c.offset;
    o["length"] = c.length;
    o["unknown_bases"] = c.unknown;
    o["soft_masked_bases"] = c.soft_masked;
    if (masked) o["masked_bases"] = c.soft_masked;  // read as unknown: included in unknown_bases
    o["gc_fraction"] = c.composition.gc_fraction();
    o["cpg_obs_exp"] = number_or_null(c.composition.cpg_obs_exp());
    o["log_likelihood"] = c.log_likelihood;
    // Only where the screening rule applies, so that other profiles' summaries stay as they were.
    if (ForeignContigRule::applies(model)) {
        o["atypical_fraction"] = ForeignContigRule::atypical_fraction(model, c);
        if (!std::isnan(c.composition_distance)) {
            o["composition_distance"] = c.composition_distance;
            o["composition_limit"] = c.composition_limit;
        }
    }
    ordered_json regions = ordered_json::object();
    for (size_t r = 0; r < model.region_names.size(); ++r) {
        const double expected = r < c.expected_bases.size() ? c.expected_bases[r] : 0.0;
        ordered_json x;
        x["expected_bases"] = expected;
        x["expected_fraction"] = known_share(expected, c);
        x["reported"] = static_cast<bool>(model.region_report[r]);
        if (model.region_report[r]) {
            const int64_t calls = r < c.calls.size() ? c.calls[r] : 0;
            x["calls"] = calls;
            x["called_bases"] = r < c.called_bases.size() ? c.called_bases[r] : 0;
            if (report) {
                x["call_length"] =
                    r < c.call_lengths.size() ? length_distribution(c.call_lengths[r]) : nullptr;
                x["mean_call_confidence"] =
                    calls > 0 ? ordered_json(c.confidence_sum[r] / static_cast<double>(calls))
                              : ordered_json(nullptr);
            }
        }
        regions[model.region_names[r]] = x;
    }
    o["regions"] = regions;
    return o;
}

}  // namespace

bool ForeignContigRule::applies(const Model& model) {
    const auto& report = model.region_report;
    return (model.window > 0 || model.viewed_window > 0) &&
           std::find(report.begin(), report.end(), true) != report.end() &&
           std::find(report.begin(), report.end(), false) != report.end();
}

double ForeignContigRule::atypical_fraction(const Model& model, const ContigSummary& c) {
    double atypical = 0;
    for (size_t r = 0; r < model.region_names.size() && r < c.expected_bases.size(); ++r)
        if (model.region_report[r]) atypical += c.expected_bases[r];
    return known_share(atypical, c);
}

bool ForeignContigRule::foreign(const Model& model, const ContigSummary& c) {
    return applies(model) && c.composition.known() >= min_known(model) &&
           (atypical_fraction(model, c) >= min_atypical || composition_foreign(c));
}

namespace {

// The regions on one side of the screening rule, by name.
std::vector<std::string> regions_reported(const Model& model, bool reported) {
    std::vector<std::string> names;
    for (size_t r = 0; r < model.region_names.size(); ++r)
        if (model.region_report[r] == reported) names.push_back(model.region_names[r]);
    return names;
}

std::string joined(const std::vector<std::string>& names) {
    std::string out;
    for (const auto& n : names) out += (out.empty() ? "" : ", ") + n;
    return out;
}

// screened: the run's profile has a contig screen (some contig carries a distance); only then
// the entries and the rule name the screen's part, so that other profiles' lists stay as they were.
ordered_json foreign_contigs_json(const Model& model, const std::vector<ContigSummary>& foreign,
                                  bool screened) {
    ordered_json list = ordered_json::array();
    int64_t bases = 0;
    for (const auto& c : foreign) {
        bases += c.length;
        ordered_json o = {{"name", c.name},
                          {"input_index", c.input_index},
                          {"length", c.length},
                          {"known_bases", c.composition.known()},
                          {"gc_fraction", c.composition.gc_fraction()},
                          {"atypical_fraction", ForeignContigRule::atypical_fraction(model, c)}};
        if (screened) {
            o["composition_distance"] = number_or_null(c.composition_distance);
            o["composition_limit"] = number_or_null(c.composition_limit);
            o["by_posterior"] =
                ForeignContigRule::atypical_fraction(model, c) >= ForeignContigRule::min_atypical;
            o["by_composition"] = ForeignContigRule::composition_foreign(c);
        }
        list.push_back(std::move(o));
    }
    ordered_json out = {{"atypical_regions", regions_reported(model, true)},
                        {"background_regions", regions_reported(model, false)},
                        {"min_known_bases", ForeignContigRule::min_known(model)},
                        {"min_atypical_fraction", ForeignContigRule::min_atypical}};
    if (screened) {
        out["composition_min_known_bases"] = ContigScreenRule::min_known;
        out["composition_level"] = ContigScreenRule::level;
    }
    out["count"] = static_cast<int64_t>(foreign.size());
    out["bases"] = bases;
    out["contigs"] = list;
    return out;
}

}  // namespace

std::vector<DepletionWarning> depletion_warnings(const Model& model,
                                                 const std::vector<ContigSummary>& contigs) {
    SummaryBuilder run(model, false, {});
    for (const auto& c : contigs) run.add(c);
    return run.depletion_warnings();
}

std::vector<double> call_length_edges(int64_t longest) {
    std::vector<double> edges = {1};
    for (double decade = 1; edges.back() <= static_cast<double>(longest); decade *= 10)
        for (const double step : {2.0, 5.0, 10.0}) edges.push_back(decade * step);
    return edges;
}

std::vector<double> confidence_edges() {
    std::vector<double> edges;
    for (int i = 0; i <= 20; ++i) edges.push_back(i / 20.0);
    return edges;
}

std::vector<int64_t> histogram_counts(const std::vector<double>& edges,
                                      const std::vector<int64_t>& values) {
    return counts_in(edges, values);
}

std::vector<int64_t> histogram_counts(const std::vector<double>& edges,
                                      const std::vector<double>& values) {
    return counts_in(edges, values);
}

void ContigSummary::reset_calls(size_t regions) {
    expected_bases.resize(regions, 0.0);
    called_bases.assign(regions, 0);
    calls.assign(regions, 0);
    call_lengths.assign(regions, {});
    confidence_sum.assign(regions, 0.0);
    call_confidences.assign(regions, {});
}

void ContigSummary::add_call(const Call& call, size_t regions) {
    if (calls.size() < regions) {
        called_bases.resize(regions, 0);
        calls.resize(regions, 0);
        call_lengths.resize(regions);
        confidence_sum.resize(regions, 0.0);
        call_confidences.resize(regions);
    }
    const auto r = static_cast<size_t>(call.region);
    called_bases[r] += call.composition.known();
    ++calls[r];
    call_lengths[r].push_back(call.end - call.begin);
    confidence_sum[r] += call.mean_posterior;
    call_confidences[r].push_back(call.mean_posterior);
}

void RegionTotals::begin_contig(const Contig& contig) {
    contig_ = &contig;
    expected_.assign(model_.region_names.size(), 0.0);
    begun_ = true;
    ended_ = false;
}

void RegionTotals::join(DecodeSink& later) {
    auto* other = dynamic_cast<RegionTotals*>(&later);
    if (!other) throw InternalError("RegionTotals::join: not a fork of a RegionTotals");
    if (other->ended_ || !begun_ || ended_) {
        expected_.swap(other->expected_);  // a reused fork keeps the old buffer (pipeline.hpp)
        begun_ = other->begun_;
        ended_ = other->ended_;
        return;
    }
    for (size_t r = 0; r < expected_.size() && r < other->expected_.size(); ++r)
        expected_[r] += other->expected_[r];
}

namespace {

// Per-state column sums of rows [from, to) of a block, each in position order, added to `out`.
// Small state counts keep the sums in local variables: a heap vector could alias the posteriors,
// and the compiler would store and reload every sum at every position.
template <int Fixed>
void column_sums(const BlockView& view, int64_t from, int64_t to, double* out) {
    const int S = Fixed > 0 ? Fixed : view.states;
    if constexpr (Fixed > 0) {
        std::array<double, Fixed> sum{};
        const double* p = view.posterior + from * Fixed;
        for (int64_t t = from; t < to; ++t, p += Fixed)
            for (int s = 0; s < Fixed; ++s) sum[s] += p[s];
        for (int s = 0; s < Fixed; ++s) out[s] += sum[s];
    } else {
        for (int64_t t = from; t < to; ++t)
            for (int s = 0; s < S; ++s) out[s] += view.posterior[t * S + s];
    }
}

}  // namespace

void RegionTotals::block(const BlockView& view) {
    const int S = view.states;
    // Per-state column sums first, then regions: fewer indirections in the loop. Unknown bases
    // are left out: expected bases are a share of the known ones.
    by_state_.assign(S, 0.0);
    const auto sums = [&](int64_t from, int64_t to) {
        switch (S) {
            case 1:
                return column_sums<1>(view, from, to, by_state_.data());
            case 2:
                return column_sums<2>(view, from, to, by_state_.data());
            case 3:
                return column_sums<3>(view, from, to, by_state_.data());
            case 4:
                return column_sums<4>(view, from, to, by_state_.data());
            case 5:
                return column_sums<5>(view, from, to, by_state_.data());
            case 6:
                return column_sums<6>(view, from, to, by_state_.data());
            default:
                return column_sums<0>(view, from, to, by_state_.data());
        }
    };
    unknown_runs_in(*contig_, view.begin, view.begin + view.size, 1, unknown_);
    int64_t from = 0;
    for (const auto& [begin, end] : unknown_) {
        if (begin - view.begin > from) sums(from, begin - view.begin);
        from = end - view.begin;
    }
    if (view.size > from) sums(from, view.size);
    for (int s = 0; s < S; ++s) expected_[model_.region_of_state[s]] += by_state_[s];
}

// Spooled text: in memory up to a limit, then in an unnamed temporary file.
class SummaryBuilder::Spool {
public:
    Spool() = default;
    Spool(const Spool&) = delete;
    Spool& operator=(const Spool&) = delete;
    ~Spool() {
        if (file_) std::fclose(file_);
    }
    void append(std::string_view text) {
        if (!file_ && memory_.size() + text.size() <= in_memory) {
            memory_ += text;
            return;
        }
        if (!file_) {
            file_ = std::tmpfile();
            if (!file_)
                throw IoError(fmt::format(
                    "cannot create a temporary file for the per-record summary entries: {}",
                    std::strerror(errno)));
        }
        if (std::fwrite(text.data(), 1, text.size(), file_) != text.size())
            throw IoError(
                fmt::format("cannot write the temporary file of per-record summary "
                            "entries: {}",
                            std::strerror(errno)));
    }
    void replay(const Writer& out) const {
        out(memory_);
        if (!file_) return;
        if (std::fflush(file_) != 0 || std::fseek(file_, 0, SEEK_SET) != 0)
            throw IoError("cannot read back the temporary file of per-record summary entries");
        std::string buffer(size_t{1} << 20, '\0');
        for (;;) {
            const size_t got = std::fread(buffer.data(), 1, buffer.size(), file_);
            if (got > 0) out(std::string_view(buffer.data(), got));
            if (got < buffer.size()) break;
        }
        if (std::ferror(file_))
            throw IoError("cannot read back the temporary file of per-record summary entries");
        std::fseek(file_, 0, SEEK_END);
    }

private:
    static constexpr size_t in_memory = size_t{8} << 20;
    std::string memory_;
    std::FILE* file_ = nullptr;
};

namespace {

// One entry of the "contigs" array: one line of compact JSON, indented as dump(2) indents
// the array's items. A draft of 3 M records took 675 B a record with each field on its own
// indented line; a line per record is about half that and splits with line tools.
std::string array_entry(const ordered_json& entry, bool first) {
    return (first ? "    " : ",\n    ") + entry.dump();
}

std::string table_row(const Model& model, const ContigSummary& c) {
    std::string out = fmt::format("{:<24} {:>12} {:>10} {:>7.4f} {:>16.4f}", c.name, c.length,
                                  c.unknown, c.composition.gc_fraction(), c.log_likelihood);
    for (size_t r = 0; r < model.region_names.size(); ++r)
        if (model.region_report[r]) {
            const double frac =
                r < c.expected_bases.size() ? 100.0 * known_share(c.expected_bases[r], c) : 0.0;
            out += fmt::format(" {:>14.4f} {:>7}", frac, r < c.calls.size() ? c.calls[r] : 0);
        }
    return out + '\n';
}

}  // namespace

SummaryBuilder::SummaryBuilder(const Model& model, bool soft_masked_unknown, Parts parts)
    : model_(model),
      masked_(soft_masked_unknown),
      parts_(parts),
      total_(empty_total(model.region_names.size())),
      summary_entries_(std::make_unique<Spool>()),
      report_entries_(std::make_unique<Spool>()),
      table_rows_(std::make_unique<Spool>()) {}

SummaryBuilder::~SummaryBuilder() = default;

void SummaryBuilder::add(const ContigSummary& c) {
    add_to_total(total_, c, model_.region_names.size());
    const bool first = contigs_ == 0;
    ++contigs_;
    screened_ = screened_ || !std::isnan(c.composition_distance);
    if (parts_.summary)
        summary_entries_->append(array_entry(contig_json(model_, c, false, masked_), first));
    if (parts_.report)
        report_entries_->append(array_entry(contig_json(model_, c, true, masked_), first));
    if (parts_.table) table_rows_->append(table_row(model_, c));
    // NaN (no C or no G) compares false: nothing to judge.
    if (c.composition.known() >= DepletionRule::min_contig_known &&
        c.composition.cpg_obs_exp() > DepletionRule::max_obs_exp) {
        ContigSummary named;
        named.name = c.name;
        named.composition = c.composition;
        undepleted_.push_back(std::move(named));
    }
    if (ForeignContigRule::foreign(model_, c)) {
        ContigSummary named;
        named.name = c.name;
        named.input_index = c.input_index;
        named.offset = c.offset;
        named.length = c.length;
        named.composition = c.composition;
        named.expected_bases = c.expected_bases;
        named.composition_distance = c.composition_distance;
        named.composition_limit = c.composition_limit;
        foreign_.push_back(std::move(named));
    }
}

std::vector<DepletionWarning> SummaryBuilder::depletion_warnings() const {
    std::vector<DepletionWarning> out;
    if (std::find(model_.region_names.begin(), model_.region_names.end(), "cpg_island") ==
        model_.region_names.end())
        return out;
    const auto warning = [&](const std::string& contig, const Composition& comp, double limit) {
        DepletionWarning w;
        w.contig = contig;
        w.cpg_obs_exp = comp.cpg_obs_exp();
        w.known_bases = comp.known();
        w.message = fmt::format(
            "{} has CpG o/e {:.3f} over {} known bases, above {}: CpG is not depleted there, but "
            "profile '{}' "
            "assumes a CpG-depleted (vertebrate) genome, so its calls there are GC-rich stretches "
            "rather than "
            "CpG islands",
            contig.empty() ? std::string("the input") : "contig '" + contig + "'", w.cpg_obs_exp,
            w.known_bases, limit, model_.name);
        out.push_back(std::move(w));
    };
    const int64_t known = total_.composition.known();
    const double limit = known >= DepletionRule::min_genome_known
                             ? DepletionRule::max_obs_exp
                             : DepletionRule::short_max_obs_exp;
    if (known >= DepletionRule::short_min_known && total_.composition.cpg_obs_exp() > limit) {
        warning("", total_.composition, limit);
        return out;
    }
    for (const auto& c : undepleted_) warning(c.name, c.composition, DepletionRule::max_obs_exp);
    return out;
}

void SummaryBuilder::write_document(const char* format, const RunInfo& info, bool report,
                                    const Spool& entries, const ResourceUsage* usage,
                                    const Writer& out) const {
    ordered_json doc;
    doc["format"] = format;
    doc["tool_version"] = TIDEMARK_VERSION;
    doc["command"] = info.command_line;
    doc["inputs"] = info.inputs;
    doc["profile"] = info.profile_name;
    if (report) {
        doc["profile_crc32"] = info.profile_checksum;
        doc["options"] = info.options ? run_options_json(*info.options) : ordered_json::object();
    }
    doc["decode"] = info.decode_mode;
    if (info.soft_masked_unknown) doc["soft_masked"] = "unknown";
    doc["genome"] = contig_json(model_, total_, report, info.soft_masked_unknown);
    doc["genome"].erase("name");
    doc["genome"].erase("input_index");
    if (report)
        for (size_t r = 0; r < model_.region_names.size(); ++r)
            if (model_.region_report[r])
                doc["genome"]["regions"][model_.region_names[r]].update(call_histograms(total_, r));
    doc["genome"]["contigs"] = contigs_;
    if (ForeignContigRule::applies(model_))
        doc["foreign_contigs"] = foreign_contigs_json(model_, foreign_, screened_);
    // The entries are spooled: a placeholder marks where they go.
    static const std::string placeholder = "tidemark: contig entries";
    doc["contigs"] = placeholder;
    const std::vector<DepletionWarning> warnings = depletion_warnings();
    if (!warnings.empty()) {  // absent otherwise, so that earlier summaries stay as they were
        ordered_json w = ordered_json::array();
        for (const auto& x : warnings)
            w.push_back(
                {{"kind", "cpg_not_depleted"},
                 {"contig", x.contig.empty() ? ordered_json(nullptr) : ordered_json(x.contig)},
                 {"cpg_obs_exp", x.cpg_obs_exp},
                 {"known_bases", x.known_bases},
                 {"message", x.message}});
        doc["warnings"] = w;
    }
    if (info.shard) doc["shard"] = *info.shard;
    if (usage) {
        // Times differ between runs; keeping them in one object leaves the rest comparable.
        const double bases = static_cast<double>(total_.length);
        doc["resources"] = {
            {"wall_seconds", usage->wall_seconds},
            {"cpu_seconds", usage->cpu_seconds},
            {"mbp_per_second", usage->wall_seconds > 0 ? bases / 1e6 / usage->wall_seconds : 0.0},
            {"peak_rss_bytes", usage->peak_rss_bytes}};
    }
    const std::string text = doc.dump(2) + "\n";
    const std::string marker = '"' + placeholder + '"';
    const size_t at = text.find(marker);
    if (at == std::string::npos) throw InternalError("summary document without its contig list");
    out(std::string_view(text).substr(0, at));
    if (contigs_ == 0) {
        out("[]");
    } else {
        out("[\n");
        entries.replay(out);
        out("\n  ]");
    }
    out(std::string_view(text).substr(at + marker.size()));
}

void SummaryBuilder::write_summary(const RunInfo& info, const Writer& out) const {
    if (!parts_.summary) throw InternalError("SummaryBuilder: the summary was not asked for");
    write_document("tidemark-summary/1", info, false, *summary_entries_, nullptr, out);
}

void SummaryBuilder::write_report(const RunInfo& info, const ResourceUsage& usage,
                                  const Writer& out) const {
    if (!parts_.report) throw InternalError("SummaryBuilder: the report was not asked for");
    write_document("tidemark-report/1", info, true, *report_entries_, &usage, out);
}

void SummaryBuilder::write_table(const Writer& out) const {
    if (!parts_.table) throw InternalError("SummaryBuilder: the table was not asked for");
    std::string header = fmt::format("{:<24} {:>12} {:>10} {:>7} {:>16}", "contig", "length",
                                     "unknown", "GC", "log_likelihood");
    for (size_t r = 0; r < model_.region_names.size(); ++r)
        if (model_.region_report[r])
            header += fmt::format(" {:>14} {:>7}", model_.region_names[r] + "%", "calls");
    out(header + '\n');
    table_rows_->replay(out);
    out(table_row(model_, total_));
}

std::string SummaryBuilder::genome_table(const ResourceUsage& usage) const {
    const ContigSummary& g = total_;
    const double obs_exp = g.composition.cpg_obs_exp();  // NaN without C or G: NA, as in the BED
    std::string out = fmt::format(
        "tidemark: {} contig{}, {} bp ({} unknown), GC {:.4f}, CpG o/e {}, log-likelihood {:.4f}\n",
        contigs_, contigs_ == 1 ? "" : "s", g.length, g.unknown, g.composition.gc_fraction(),
        std::isnan(obs_exp) ? std::string("NA") : fmt::format("{:.4f}", obs_exp), g.log_likelihood);
    out += fmt::format("tidemark: called% and expected% are shares of the {} known bases\n",
                       g.composition.known());
    out +=
        fmt::format("tidemark: {:<16} {:>10} {:>9} {:>14} {:>8} {:>8} {:>8} {:>10}\n", "region",
                    "calls", "called%", "expected%", "min_len", "med_len", "max_len", "mean_conf");
    for (size_t r = 0; r < model_.region_names.size(); ++r) {
        if (!model_.region_report[r]) continue;
        const LengthStats ls = length_stats(g.call_lengths[r]);
        out += fmt::format(
            "tidemark: {:<16} {:>10} {:>9.4f} {:>14.4f} {:>8} {:>8.1f} {:>8} {:>10.4f}\n",
            model_.region_names[r], g.calls[r],
            100.0 * known_share(static_cast<double>(g.called_bases[r]), g),
            100.0 * known_share(g.expected_bases[r], g), ls.min, ls.median, ls.max,
            g.calls[r] > 0 ? g.confidence_sum[r] / static_cast<double>(g.calls[r]) : 0.0);
    }
    if (ForeignContigRule::applies(model_)) {
        // The list itself is in the summary; a terminal gets the first names.
        constexpr size_t named = 10;
        int64_t bases = 0;
        for (const auto& c : foreign_) bases += c.length;
        out += fmt::format(
            "tidemark: foreign contigs (P(atypical) >= {} over >= {} known bases{}; atypical: "
            "{}): {} of {}, {} bp{}\n",
            ForeignContigRule::min_atypical, ForeignContigRule::min_known(model_),
            screened_ ? fmt::format(", or a trinucleotide signature beyond the fitted genome's "
                                    "own over >= {}",
                                    ContigScreenRule::min_known)
                      : std::string(),
            joined(regions_reported(model_, true)), foreign_.size(), contigs_, bases,
            foreign_.empty() ? "" : ":");
        for (size_t i = 0; i < foreign_.size() && i < named; ++i)
            out += fmt::format(
                "tidemark:   {} ({} bp, GC {:.4f}, P(atypical) {:.4f}{})\n", foreign_[i].name,
                foreign_[i].length, foreign_[i].composition.gc_fraction(),
                ForeignContigRule::atypical_fraction(model_, foreign_[i]),
                ForeignContigRule::composition_foreign(foreign_[i])
                    ? fmt::format(", signature distance {:.1f} > {:.1f}",
                                  foreign_[i].composition_distance, foreign_[i].composition_limit)
                    : "");
        if (foreign_.size() > named)
            out += fmt::format("tidemark:   and {} more (--summary lists them all)\n",
                               foreign_.size() - named);
    }
    out += fmt::format(
        "tidemark: {:.2f} s wall, {:.2f} s CPU, {:.2f} Mbp/s, peak memory {:.1f} MiB\n",
        usage.wall_seconds, usage.cpu_seconds,
        usage.wall_seconds > 0 ? static_cast<double>(g.length) / 1e6 / usage.wall_seconds : 0.0,
        static_cast<double>(usage.peak_rss_bytes) / (1 << 20));
    return out;
}

namespace {

// A whole document built in memory from a list of contigs (merge).
std::string collect(const std::function<void(const SummaryBuilder::Writer&)>& write) {
    std::string text;
    write([&](std::string_view piece) { text += piece; });
    return text;
}

}  // namespace

std::string summary_json(const RunInfo& info, const Model& model,
                         const std::vector<ContigSummary>& contigs) {
    SummaryBuilder run(model, info.soft_masked_unknown, {true, false, false});
    for (const auto& c : contigs) run.add(c);
    return collect([&](const SummaryBuilder::Writer& out) { run.write_summary(info, out); });
}

std::string report_json(const RunInfo& info, const Model& model,
                        const std::vector<ContigSummary>& contigs, const ResourceUsage& usage) {
    SummaryBuilder run(model, info.soft_masked_unknown, {false, true, false});
    for (const auto& c : contigs) run.add(c);
    return collect([&](const SummaryBuilder::Writer& out) { run.write_report(info, usage, out); });
}

}  // namespace tidemark
