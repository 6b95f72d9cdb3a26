// The fit job: options -> training data -> Baum-Welch, labelled counting or class selection ->
// a profile with provenance, written only when everything succeeded.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <nlohmann/json.hpp>
#include <numeric>
#include <optional>

#include "tidemark/contig_screen.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/summary.hpp"
#include "tidemark/train.hpp"

namespace tidemark {

namespace {

// The median over contexts of a signature's concentration: how closely a typical window's
// transition rows follow the mean (high) or scatter away from it (low).
double median_concentration(const WindowSignature& sig) {
    std::vector<double> c = sig.concentration;
    std::sort(c.begin(), c.end());
    const size_t n = c.size();
    return n % 2 ? c[n / 2] : (c[n / 2 - 1] + c[n / 2]) / 2;
}

// What a fit of a window profile learned, one line per state: GC, dispersion and the mean length
// of its segments (the min_length chain plus the geometric tail, in bases).
std::string learned_classes(const Profile& p) {
    std::string out = "fit: learned classes (window " + std::to_string(p.window_size) + " bases):";
    for (size_t s = 0; s < p.states.size(); ++s) {
        const StateSpec& st = p.states[s];
        double stay = 0;
        for (size_t u = 0; u < p.states.size(); ++u)
            if (p.states[u].region == st.region) stay += p.transitions[s][u];
        const double windows =
            static_cast<double>(p.chain_length(st.region) - 1) + 1 / std::max(1e-300, 1 - stay);
        out += fmt::format("\n  {:<12} GC {:.4f}", st.name, state_gc(st));
        if (st.has_gc) out += fmt::format("  dispersion {:.3g}", st.gc.dispersion);
        if (st.signature.present())
            out +=
                fmt::format("  signature concentration {:.4g}", median_concentration(st.signature));
        out += fmt::format("  mean segment {:.1f} kb",
                           windows * static_cast<double>(p.window_size) / 1000);
    }
    return out;
}

bool has_ordered_classes(const Profile& p) {
    return std::any_of(p.states.begin(), p.states.end(), [](const StateSpec& s) {
        return !s.gc_reference.empty() || !s.signature.concentration_reference.empty();
    });
}

// What a fit learned for one window state, for its region's description: its fitted G+C (and
// its reference's, for an ordered class), dispersion and signature concentration.
std::string fitted_values(const Profile& p, const StateSpec& st) {
    std::string text = fmt::format("G+C {:.3f}", state_gc(st));
    if (!st.gc_reference.empty())
        text += fmt::format(" ({} {:.3f})", st.gc_reference,
                            p.states[p.state_index(st.gc_reference)].gc.mean);
    if (st.has_gc) text += fmt::format(", dispersion {:.3g}", st.gc.dispersion);
    if (st.signature.present()) {
        text += fmt::format(", {}-mer signature concentration {:.4g}", st.signature.k,
                            median_concentration(st.signature));
        const std::string& ref = st.signature.concentration_reference;
        if (!ref.empty())
            text += fmt::format(" ({} {:.4g})", ref,
                                median_concentration(p.states[p.state_index(ref)].signature));
        text += " (median over contexts)";
    }
    return text;
}

// A fitted profile's regions say what was fitted, not what the template hoped for: a region of
// one window state gets that state's fitted values; a region of several, each state's, named
// ("typical: G+C ...; typical_broad: G+C ...").
void describe_fitted_classes(Profile& p) {
    for (size_t r = 0; r < p.regions.size(); ++r) {
        std::vector<const StateSpec*> members;
        for (const StateSpec& st : p.states)
            if (st.region == static_cast<int>(r)) members.push_back(&st);
        if (members.empty()) continue;
        std::string text;
        if (members.size() == 1) {
            text = fitted_values(p, *members.front());
        } else {
            for (const StateSpec* st : members)
                text += (text.empty() ? "" : "; ") + st->name + ": " + fitted_values(p, *st);
        }
        p.regions[r].description = text + ": fitted by tidemark fit";
    }
}

}  // namespace

namespace {

using ordered_json = nlohmann::ordered_json;

constexpr int max_classes = 64;
constexpr size_t max_listed_sequences = 1000;

std::vector<std::string> freeze_words(const Freeze& f) {
    std::vector<std::string> w;
    if (f.initial) w.push_back("initial");
    if (f.transitions) w.push_back("transitions");
    if (f.emissions) w.push_back("emissions");
    for (const auto& s : f.transition_states) w.push_back("transitions:" + s);
    for (const auto& s : f.emission_states) w.push_back("emissions:" + s);
    return w;
}

std::string default_region_of(const Profile& p) {
    std::vector<std::string> quiet;
    for (const auto& r : p.regions)
        if (!r.report) quiet.push_back(r.name);
    if (quiet.size() == 1) return quiet[0];
    std::string names;
    for (const auto& r : p.regions) names += (names.empty() ? "" : ", ") + r.name;
    throw UsageError(
        fmt::format("--labels: say which region unlabelled bases belong to with --default-region "
                    "(profile '{}' has regions {})",
                    p.name, names));
}

// Warns when training changed the GC order of the states, since their names then may no
// longer describe them (e.g. 'typical' ending up GC-richer than 'gc_shifted').
void warn_on_swaps(const Profile& before, const Profile& after, const Logger& log) {
    const size_t P = before.states.size();
    for (size_t a = 0; a < P; ++a)
        for (size_t b = a + 1; b < P; ++b) {
            const double x0 = state_gc(before.states[a]), y0 = state_gc(before.states[b]);
            const double x1 = state_gc(after.states[a]), y1 = state_gc(after.states[b]);
            if ((x0 < y0 && x1 > y1) || (x0 > y0 && x1 < y1))
                log.warn(fmt::format(
                    "fit: states '{}' and '{}' swapped their GC order during training "
                    "(GC {:.3f}/{:.3f} at the start, {:.3f}/{:.3f} fitted); their names may "
                    "no longer describe them (try --init-from-data)",
                    before.states[a].name, before.states[b].name, x0, y0, x1, y1));
        }
}

ordered_json input_json(const FastaTrainingData& data) {
    ordered_json files = ordered_json::array();
    for (const auto& r : data.records()) {
        if (files.empty() || files.back()["path"] != r.input)
            files.push_back(
                {{"path", r.input}, {"records", 0}, {"bases", 0}, {"unknown_bases", 0}});
        auto& f = files.back();
        f["records"] = f["records"].get<int64_t>() + 1;
        f["bases"] = f["bases"].get<int64_t>() + r.length;
        f["unknown_bases"] = f["unknown_bases"].get<int64_t>() + r.unknown;
    }
    return files;
}

ordered_json sequences_json(const FastaTrainingData& data) {
    ordered_json list = ordered_json::array();
    for (const auto& r : data.records()) {
        if (list.size() == max_listed_sequences) break;
        ordered_json o = {{"name", r.name}, {"length", r.length}};
        if (r.offset > 0) o["offset"] = r.offset;
        list.push_back(o);
    }
    return list;
}

// Islands profiles with a signature (the composition-shift template) get the genome's contig
// screen, so that scanning a draft with the fitted profile lists foreign contigs that match no
// fitted class (contig_screen.hpp). One more pass over the data.
void fit_screen(Profile& p, TrainingData& data, const Logger& log) {
    p.contig_screen = ContigScreen{};
    const bool signature = p.windowed() && p.states.front().signature.present();
    if (!signature || !ForeignContigRule::applies(compile(p))) return;
    p.contig_screen = fit_contig_screen(data);
    if (p.contig_screen.present())
        log.info(fmt::format(
            "fit: contig screen from the genome's own stretches of {} to {} known bases",
            p.contig_screen.lengths.front(), p.contig_screen.lengths.back()));
    else
        log.info(fmt::format(
            "fit: no contig screen: the genome has too few stretches of {} known bases to "
            "measure the spread of their trinucleotide signatures (at least {} are needed)",
            ContigScreenRule::min_known, screen_dimensions + 1));
}

}  // namespace

std::string fitted_profile_name(const std::string& start_name, bool may_continue) {
    const std::string suffix = "-fit";
    const bool fitted =
        start_name.size() >= suffix.size() &&
        start_name.compare(start_name.size() - suffix.size(), suffix.size(), suffix) == 0;
    return may_continue && fitted ? start_name : start_name + suffix;
}

void parse_class_range(const std::string& text, int& lo, int& hi) {
    const auto bad = [&] {
        return UsageError(
            fmt::format("--classes '{}': expected a count K or a range A..B with 1 <= A <= B <= {}",
                        text, max_classes));
    };
    const auto number = [&](const std::string& s) {
        if (s.empty() || s.size() > 3 ||
            !std::all_of(s.begin(), s.end(), [](char c) { return c >= '0' && c <= '9'; }))
            throw bad();
        return std::stoi(s);
    };
    const auto dots = text.find("..");
    lo = number(text.substr(0, dots));
    hi = dots == std::string::npos ? lo : number(text.substr(dots + 2));
    if (lo < 1 || hi < lo || hi > max_classes) throw bad();
}

void validate(const FitJobOptions& o) {
    if (o.fit.threads < 0) throw UsageError("--threads must be >= 0 (0 = every core)");
    if (o.shard.active() || !o.emit_stats.empty() || !o.from_stats.empty() ||
        !o.emit_seams.empty() || !o.seams.empty() || o.whole_contigs)
        return validate_distributed(o);
    if (o.inputs.empty()) throw UsageError("fit needs at least one FASTA file");
    const bool from_template = o.classes_min > 0;
    if (from_template && !o.profile.empty())
        throw UsageError(
            "--classes builds its own starting profile; give either --classes or --profile, not "
            "both");
    if (!from_template && o.profile.empty())
        throw UsageError(
            "fit needs a starting point: a profile (-p NAME|FILE) or a template (--classes K)");
    if (!o.select.empty() && o.select != "bic")
        throw UsageError("--select: only 'bic' is supported");
    if (!o.select.empty() && !from_template)
        throw UsageError("--select chooses among --classes A..B");
    if (from_template && o.classes_max > o.classes_min && o.select.empty())
        throw UsageError(
            "--classes A..B fits several class counts: add --select bic to choose one");
    if (from_template && (o.order < 0 || o.order > max_emission_order))
        throw UsageError(fmt::format("--order must be from 0 to {}", max_emission_order));
    if (o.init_from_data && from_template)
        throw UsageError(
            "--init-from-data reseeds a --profile; --classes templates are always seeded from the "
            "data");
    if (!o.labels.empty()) {
        if (from_template)
            throw UsageError("--labels needs a profile (-p) whose regions the labels name");
        if (o.fit.restarts != 1)
            throw UsageError("--restarts applies to Baum-Welch, not to --labels counting");
        if (o.init_from_data)
            throw UsageError("--init-from-data applies to Baum-Welch, not to --labels counting");
    } else if (!o.default_region.empty()) {
        throw UsageError("--default-region applies only with --labels");
    }
    if (o.fit.restarts < 1) throw UsageError("--restarts must be at least 1");
    if (o.fit.max_iter < 0) throw UsageError("--max-iter must be >= 0");
    if (!(o.fit.tol >= 0)) throw UsageError("--tol must be >= 0");
    if (!(o.fit.pseudocount >= 0) || !std::isfinite(o.fit.pseudocount))
        throw UsageError("--pseudocount must be a finite number >= 0");
    if (o.seed.window < 10) throw UsageError("--init-window must be at least 10 bases");
    if (o.fit.block_size < 0) throw UsageError("--block must be >= 0");
}

namespace {

// A fit that stopped at --max-iter warns; every fit ends with one line: where the profile went,
// iterations, converged or not, final log-likelihood.
void log_fit_outcome(const FitJobOptions& o, const std::string& method, const FitResult& result,
                     const Logger& log) {
    const std::string where = o.output == "-"    ? "standard output"
                              : o.output.empty() ? "no file (the caller keeps the profile)"
                                                 : o.output;
    if (method != "baum-welch") {
        log.info(
            fmt::format("fit: wrote {}: labelled counts (no iterations), log-likelihood {:.6f}",
                        where, result.log_likelihood));
        return;
    }
    std::string state = result.converged ? "converged" : "not converged";
    if (!result.converged && result.iterations == 0) {
        state = "start evaluated only (--max-iter 0)";
    } else if (!result.converged) {
        // The last relative change of the kept run, as the per-iteration lines show it.
        double change = std::numeric_limits<double>::quiet_NaN();
        const IterationRecord* previous = nullptr;
        for (const auto& h : result.history) {
            if (h.restart != result.best_restart) continue;
            if (previous)
                change = (h.log_likelihood - previous->log_likelihood) /
                         std::abs(previous->log_likelihood);
            previous = &h;
        }
        log.warn(fmt::format(
            "fit: stopped at --max-iter {} without converging: the last relative log-likelihood "
            "change {:+.3e} is not below --tol {:g}; the profile may still improve with a larger "
            "--max-iter",
            result.iterations, change, o.fit.tol));
    }
    log.info(fmt::format(
        "fit: wrote {}: {} iteration{}, {}, log-likelihood {:.6f}; {:.2f} s wall, {:.2f} s CPU",
        where, result.iterations, result.iterations == 1 ? "" : "s", state, result.log_likelihood,
        result.wall_seconds, result.cpu_seconds));
}

}  // namespace

FitResult run_fit(const FitJobOptions& o, const Logger& log) {
    validate(o);
    if (!o.from_stats.empty()) return fit_from_statistics(o, log);
    if (!o.emit_stats.empty() || !o.emit_seams.empty()) return emit_statistics(o, log);
    FastaTrainingData data(o.inputs, o.regions, o.regions_bed, o.soft_masked);
    // Open the output before the long work so that an unwritable path fails at once; it is
    // committed only at the end. No output: the caller takes the profile from the result.
    std::optional<OutputFile> out;
    if (!o.output.empty()) out.emplace(o.output);

    FitResult result;
    Selection selection;
    std::string method = "baum-welch", start_name;
    std::vector<std::string> start_sources;
    if (!o.labels.empty()) {
        method = "labelled";
        const Profile start = load_profile(o.profile);
        if (start.windowed())
            throw UsageError(fmt::format(
                "--labels counts per-base emissions; '{}' is a window profile (fit it by "
                "Baum-Welch, without --labels)",
                start.name));
        start_name = start.name;
        start_sources = start.sources;
        const std::string fallback =
            o.default_region.empty() ? default_region_of(start) : o.default_region;
        const std::vector<Interval> labels = read_bed(o.labels);
        const TrainingCounts counts = labelled_counts(start, data, labels, fallback, log);
        if (counts.known == 0)
            throw InputError("the training sequences contain no known base (A, C, G or T)");
        const FreezeMask freeze = resolve_freeze(o.fit.freeze, start);
        result.profile = maximise(start, start, counts, freeze, MStepOptions{o.fit.pseudocount});
        const TrainingCounts check =
            expected_counts(result.profile, data, o.fit.block_size, o.fit.threads);
        result.log_likelihood = check.log_likelihood;
        result.known_bases = check.known;
        result.positions = check.positions;
        result.contigs = check.contigs;
        log.info(
            fmt::format("fit: labelled counts over {} bases; log-likelihood of the result {:.6f}",
                        counts.positions, result.log_likelihood));
    } else if (o.classes_min > 0) {
        start_name = fmt::format("template of {} class(es), order {}", o.classes_min, o.order);
        if (o.select.empty()) {
            const Profile start = class_template(data, o.classes_min, o.order, o.seed);
            FitOptions f = o.fit;
            f.order_by_gc = true;
            result = baum_welch(start, data, f, log);
        } else {
            start_name = fmt::format("templates of {}..{} classes, order {}", o.classes_min,
                                     o.classes_max, o.order);
            selection =
                select_classes(data, o.classes_min, o.classes_max, o.order, o.seed, o.fit, log);
            log.info("fit: model selection by BIC\n" + selection_table(selection));
            result = selection.candidates[selection.chosen].fit;
        }
    } else {
        Profile start = load_profile(o.profile);
        start_name = start.name;
        start_sources = start.sources;
        if (o.init_from_data || start.is_template) {
            if (!o.init_from_data)
                log.info(fmt::format(
                    "fit: profile '{}' is a template: its classes are seeded from the data first",
                    start.name));
            start = seed_from_data(start, data, o.seed);
        }
        FitOptions fit = o.fit;
        if (start.is_template) {
            // A template's switch rates define what counts as a segment (how rare and how long);
            // Baum-Welch would otherwise trade them for gene-scale switching. Only its classes'
            // compositions are learned.
            fit.freeze.transitions = true;
            fit.freeze.initial = true;
            log.info(
                "fit: template: transitions and initial kept as given; class compositions fitted");
        }
        result = baum_welch(start, data, fit, log);
        result.profile.is_template = false;
        warn_on_swaps(start, result.profile, log);
        if (has_ordered_classes(result.profile) && fit.max_iter > 0) {  // --max-iter 0: the start
            result = drop_unsupported_classes(std::move(result), data, fit, log);
            if (!has_ordered_classes(result.profile))
                log.warn(fmt::format(
                    "fit: the genome supports none of the shifted classes of '{}': the profile "
                    "has only '{}', and scanning with it calls nothing",
                    start.name, result.profile.states[0].name));
            describe_fitted_classes(result.profile);
        }
        if (result.profile.windowed()) log.info(learned_classes(result.profile));
        fit_screen(result.profile, data, log);
    }

    Profile& p = result.profile;
    if (!o.name.empty())
        p.name = o.name;
    else if (o.classes_min == 0)
        p.name = fitted_profile_name(start_name);
    std::vector<std::string> sources;
    sources.push_back(fmt::format(
        "Parameters fitted by tidemark {} fit ({}) to the sequences listed under "
        "provenance, starting from {}.",
        TIDEMARK_VERSION, method, o.classes_min > 0 ? start_name : "profile '" + start_name + "'"));
    for (const auto& s : p.sources)
        if (std::find(start_sources.begin(), start_sources.end(), s) == start_sources.end())
            sources.push_back(s);
    for (const auto& s : start_sources)
        sources.push_back("Starting profile '" + start_name + "': " + s);
    p.sources = sources;

    ordered_json prov;
    prov["tool"] = std::string("tidemark ") + TIDEMARK_VERSION;
    prov["command_line"] = o.command_line;
    prov["method"] = method;
    prov["start"] = start_name;
    prov["inputs"] = input_json(data);
    prov["sequences"] = sequences_json(data);
    prov["sequences_total"] = data.records().size();
    ordered_json opts;
    opts["pseudocount"] = o.fit.pseudocount;
    if (method == "baum-welch") {
        opts["max_iter"] = o.fit.max_iter;
        opts["tol"] = o.fit.tol;
        opts["restarts"] = o.fit.restarts;
        opts["seed"] = o.fit.seed;
        if (o.init_from_data || o.classes_min > 0) opts["init_window"] = o.seed.window;
        if (o.init_from_data) opts["init_from_data"] = true;
    } else {
        opts["labels"] = o.labels;
        opts["default_region"] =
            o.default_region.empty() ? "(the only unreported region)" : o.default_region;
    }
    if (o.classes_min > 0) {
        opts["classes"] = o.classes_min == o.classes_max
                              ? fmt::format("{}", o.classes_min)
                              : fmt::format("{}..{}", o.classes_min, o.classes_max);
        opts["order"] = o.order;
        if (!o.select.empty()) opts["select"] = o.select;
    }
    opts["freeze"] = freeze_words(o.fit.freeze);
    if (!o.regions.empty()) opts["regions"] = o.regions;
    if (!o.regions_bed.empty()) opts["regions_bed"] = o.regions_bed;
    prov["options"] = opts;
    if (!result.dropped.empty()) prov["dropped_classes"] = result.dropped;
    prov["known_bases"] = result.known_bases;
    prov["log_likelihood"] = result.log_likelihood;
    if (method == "baum-welch") {
        prov["iterations"] = result.iterations;
        prov["converged"] = result.converged;
        if (o.fit.restarts > 1) {
            prov["restart_log_likelihoods"] = result.restart_log_likelihoods;
            prov["best_restart"] = result.best_restart + 1;
        }
        // Seconds stay out of the history: the same run must give the same file but for the
        // times, which are kept together under "resources" (as in the run report).
        ordered_json hist = ordered_json::array();
        ordered_json iteration_wall = ordered_json::array(), iteration_cpu = ordered_json::array();
        for (const auto& h : result.history)
            if (h.restart == result.best_restart) {
                hist.push_back({{"iteration", h.iteration},
                                {"log_likelihood", h.log_likelihood},
                                {"objective", h.objective}});
                iteration_wall.push_back(h.seconds);
                iteration_cpu.push_back(h.cpu_seconds);
            }
        prov["history"] = hist;
        prov["resources"] = {{"wall_seconds", result.wall_seconds},
                             {"cpu_seconds", result.cpu_seconds},
                             {"iteration_wall_seconds", iteration_wall},
                             {"iteration_cpu_seconds", iteration_cpu}};
    }
    if (!selection.candidates.empty()) {
        ordered_json table = ordered_json::array();
        for (const auto& c : selection.candidates)
            table.push_back({{"classes", c.classes},
                             {"log_likelihood", c.log_likelihood},
                             {"parameters", c.parameters},
                             {"bic", c.bic},
                             {"iterations", c.fit.iterations},
                             {"converged", c.fit.converged}});
        prov["selection"] = {
            {"criterion", "bic"},
            {"formula",
             "-2 ln L + parameters * ln(known bases) (Schwarz 1978, Ann. Statist. 6:461-464)"},
            {"candidates", table},
            {"chosen_classes", selection.candidates[selection.chosen].classes}};
    }
    p.provenance_json = prov.dump();

    // The written text must be a valid profile like any other.
    const std::string text = to_json(p);
    parse_profile(text, "fitted profile");
    if (out) {
        out->write(text);
        out->commit();
    }
    log_fit_outcome(o, method, result, log);
    return result;
}

}  // namespace tidemark
