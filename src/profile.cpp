// Profile JSON (tidemark-profile/1): parsing with field-level validation, canonical output,
// lookup of built-ins, and compilation into a Model.
#include "tidemark/profile.hpp"

#include <fmt/format.h>
#include <sys/stat.h>
#include <zlib.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <nlohmann/json.hpp>
#include <set>
#include <sstream>

#include "tidemark/contig_screen.hpp"
#include "tidemark/error.hpp"
#include "tidemark/suggest.hpp"

namespace tidemark {
namespace {

using json = nlohmann::json;
using ordered_json = nlohmann::ordered_json;

constexpr double sum_tolerance = 1e-6;

// Edit distance, to suggest the intended field for a typo.
size_t edit_distance(const std::string& a, const std::string& b) {
    std::vector<size_t> prev(b.size() + 1), cur(b.size() + 1);
    for (size_t j = 0; j <= b.size(); ++j) prev[j] = j;
    for (size_t i = 1; i <= a.size(); ++i) {
        cur[0] = i;
        for (size_t j = 1; j <= b.size(); ++j)
            cur[j] = std::min(
                {prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (a[i - 1] == b[j - 1] ? 0 : 1)});
        std::swap(prev, cur);
    }
    return prev[b.size()];
}

class Validator {
public:
    explicit Validator(std::string origin) : origin_(std::move(origin)) {}

    [[noreturn]] void fail(const std::string& where, const std::string& what) const {
        throw ProfileError(fmt::format("{}: {}: {}", origin_, where, what));
    }

    void only_fields(const json& obj, const std::string& where,
                     std::initializer_list<const char*> allowed) const {
        if (!obj.is_object()) fail(where, "must be a JSON object");
        for (const auto& [key, value] : obj.items()) {
            bool known = false;
            std::string best;
            size_t best_distance = 3;
            for (const char* a : allowed) {
                if (key == a) known = true;
                const size_t d = edit_distance(key, a);
                if (d < best_distance) {
                    best_distance = d;
                    best = a;
                }
            }
            if (!known)
                fail(where, fmt::format("unknown field '{}'{}", key,
                                        best.empty() ? "" : " (did you mean '" + best + "'?)"));
        }
    }

    const json& field(const json& obj, const char* key, const std::string& where) const {
        auto it = obj.find(key);
        if (it == obj.end()) fail(where, fmt::format("missing required field '{}'", key));
        return *it;
    }

    std::string string_field(const json& obj, const char* key, const std::string& where) const {
        const json& v = field(obj, key, where);
        if (!v.is_string()) fail(where + "." + key, "must be a string");
        return v.get<std::string>();
    }

    double probability(const json& v, const std::string& where) const {
        if (!v.is_number()) fail(where, "must be a number");
        const double p = v.get<double>();
        if (!std::isfinite(p)) fail(where, "must be finite");
        if (p < 0) fail(where, fmt::format("probability {} is negative", p));
        if (p > 1 + sum_tolerance) fail(where, fmt::format("probability {} is above 1", p));
        return p;
    }

    void sums_to_one(double sum, const std::string& where) const {
        if (std::abs(sum - 1.0) > sum_tolerance)
            fail(where, fmt::format("probabilities sum to {:.9g}, expected 1 (within {:g})", sum,
                                    sum_tolerance));
    }

    int64_t nonnegative_integer(const json& v, const std::string& where) const {
        if (!v.is_number_integer() || v.get<int64_t>() < 0)
            fail(where, "must be a non-negative integer");
        return v.get<int64_t>();
    }

private:
    std::string origin_;
};

// states[].signature: k, per-context concentration (a number applies to every context) and mean
// rows; positive entries (a Dirichlet parameter of 0 is no distribution).
WindowSignature parse_signature(const Validator& v, const json& sig, const std::string& where) {
    v.only_fields(sig, where, {"k", "concentration", "mean", "concentration_below"});
    WindowSignature out;
    const json& k = v.field(sig, "k", where);
    if (!k.is_number_integer() || k.get<int64_t>() < 1 || k.get<int64_t>() > max_signature_k)
        v.fail(where + ".k", fmt::format("must be an integer from 1 to {}", max_signature_k));
    out.k = k.get<int>();
    const size_t contexts = size_t{1} << (2 * (out.k - 1));
    const auto positive = [&](const json& x, const std::string& at) {
        if (!x.is_number()) v.fail(at, "must be a number");
        const double value = x.get<double>();
        if (!(std::isfinite(value) && value > 0))
            v.fail(at, fmt::format("must be positive and finite, not {}", value));
        return value;
    };
    const json& conc = v.field(sig, "concentration", where);
    if (conc.is_array()) {
        if (conc.size() != contexts)
            v.fail(where + ".concentration",
                   fmt::format("must be one number or an array of {} (4^(k-1)) numbers", contexts));
        for (size_t c = 0; c < contexts; ++c)
            out.concentration.push_back(
                positive(conc[c], fmt::format("{}.concentration[{}]", where, c)));
    } else {
        out.concentration.assign(contexts, positive(conc, where + ".concentration"));
    }
    const json& rows = v.field(sig, "mean", where);
    if (!rows.is_array() || rows.size() != contexts)
        v.fail(where + ".mean",
               fmt::format("must be an array of {} rows (4^(k-1)) of 4 probabilities", contexts));
    for (size_t c = 0; c < contexts; ++c) {
        const std::string rw = fmt::format("{}.mean[{}]", where, c);
        if (!rows[c].is_array() || rows[c].size() != 4)
            v.fail(rw, "must be 4 probabilities P(A), P(C), P(G), P(T) after the context");
        std::array<double, 4> row{};
        double sum = 0;
        for (int b = 0; b < 4; ++b) {
            row[b] = v.probability(rows[c][b], fmt::format("{}[{}]", rw, b));
            if (!(row[b] > 0)) v.fail(fmt::format("{}[{}]", rw, b), "must be above 0");
            sum += row[b];
        }
        v.sums_to_one(sum, rw);
        out.mean.push_back(row);
        // alpha = concentration * mean must stay a positive finite Dirichlet parameter.
        for (int b = 0; b < 4; ++b)
            if (!(out.concentration[c] * row[b] > 0) ||
                !std::isfinite(out.concentration[c] * row[b]))
                v.fail(rw, fmt::format("concentration {} times mean {} is no Dirichlet parameter",
                                       out.concentration[c], row[b]));
    }
    if (sig.contains("concentration_below")) {
        out.concentration_reference = v.string_field(sig, "concentration_below", where);
        if (out.concentration_reference.empty())
            v.fail(where + ".concentration_below", "must not be empty (omit the field instead)");
    }
    return out;
}

// The emission kinds of a window profile: every state carries the same ones (gc, signature, or
// both; one k), since a G+C count's probability and a sequence's are not comparable evidence;
// signature.concentration_below names another unconstrained, untied state with a signature and
// holds already (training keeps it but must start there).
void check_window_kinds(const Profile& p, const Validator& v) {
    if (p.window_size <= 0) return;
    const StateSpec& first = p.states.front();
    for (size_t i = 0; i < p.states.size(); ++i) {
        const StateSpec& s = p.states[i];
        const std::string where = fmt::format("states[{}] ('{}')", i, s.name);
        if (s.has_gc != first.has_gc)
            v.fail(where, fmt::format("{} 'gc' but states[0] ('{}') {}: every state of a window "
                                      "profile carries the same emission kinds",
                                      s.has_gc ? "has" : "has no", first.name,
                                      first.has_gc ? "has" : "has not"));
        if (s.signature.k != first.signature.k)
            v.fail(
                where + ".signature",
                fmt::format("{} but states[0] ('{}') {}: every state of a window profile "
                            "carries the same emission kinds (and one k)",
                            s.signature.present() ? fmt::format("k is {}", s.signature.k)
                                                  : std::string("is missing"),
                            first.name,
                            first.signature.present() ? fmt::format("has k {}", first.signature.k)
                                                      : std::string("has none")));
    }
    for (size_t i = 0; i < p.states.size(); ++i) {
        const StateSpec& s = p.states[i];
        const std::string where = fmt::format("states[{}] ('{}')", i, s.name);
        const std::string& ref_name = s.signature.concentration_reference;
        if (ref_name.empty()) continue;
        const std::string at = where + ".signature.concentration_below";
        const int r = p.state_index(ref_name);
        if (r < 0) v.fail(at, "names unknown state '" + ref_name + "'");
        if (r == static_cast<int>(i)) v.fail(at, "names the state itself");
        const StateSpec& ref = p.states[r];
        if (!ref.signature.concentration_reference.empty())
            v.fail(at, fmt::format("names '{}', which is constrained itself; a reference must "
                                   "be unconstrained",
                                   ref.name));
        if (!s.tie.empty() || !ref.tie.empty())
            v.fail(at, "a constrained state and its reference cannot be tied");
        if (ref.signature.k != s.signature.k)
            v.fail(at, fmt::format("names '{}', whose signature differs in k", ref.name));
        for (size_t c = 0; c < s.signature.concentration.size(); ++c)
            if (s.signature.concentration[c] > ref.signature.concentration[c])
                v.fail(at, fmt::format("concentration[{}] {} is above the concentration {} of "
                                       "'{}'",
                                       c, s.signature.concentration[c],
                                       ref.signature.concentration[c], ref.name));
    }
}

// gc.below / gc.above: the reference exists, is another unconstrained and untied state, the mean
// is on its side already (training keeps it there but must start there), and one reference
// orders at most max_gc_ordered states (the M-step tries every subset of them tied to it).
void check_gc_order(const Profile& p, const Validator& v) {
    for (size_t i = 0; i < p.states.size(); ++i) {
        const StateSpec& s = p.states[i];
        if (s.gc_reference.empty()) continue;
        const char* key = s.gc_side < 0 ? "below" : "above";
        const std::string where = fmt::format("states[{}] ('{}').gc.{}", i, s.name, key);
        const int r = p.state_index(s.gc_reference);
        if (r < 0) v.fail(where, "names unknown state '" + s.gc_reference + "'");
        if (r == static_cast<int>(i)) v.fail(where, "names the state itself");
        const StateSpec& ref = p.states[r];
        if (!ref.gc_reference.empty())
            v.fail(where, fmt::format("names '{}', which is ordered itself (gc.below/above); a "
                                      "reference must be unconstrained",
                                      ref.name));
        if (!s.tie.empty() || !ref.tie.empty())
            v.fail(where, "ordered states and their reference cannot be tied");
        if (s.gc_side * (s.gc.mean - ref.gc.mean) < 0)
            v.fail(where, fmt::format("mean {} is not {} the mean {} of '{}'", s.gc.mean, key,
                                      ref.gc.mean, ref.name));
        const auto ordered = std::count_if(p.states.begin(), p.states.end(), [&](const auto& u) {
            return u.gc_reference == s.gc_reference;
        });
        if (ordered > max_gc_ordered)
            v.fail(where, fmt::format("'{}' orders {} states; at most {} may refer to one state",
                                      ref.name, ordered, max_gc_ordered));
    }
}

// Tied states share one table, so the file must not give them different ones.
void check_ties(const Profile& p, const Validator& v) {
    constexpr double tie_tolerance = 1e-9;
    for (size_t i = 0; i < p.states.size(); ++i) {
        const StateSpec& a = p.states[i];
        if (a.tie.empty()) continue;
        for (size_t j = 0; j < i; ++j) {
            const StateSpec& b = p.states[j];
            if (b.tie != a.tie) continue;
            const std::string where = fmt::format("states[{}] ('{}')", i, a.name);
            if (a.order != b.order)
                v.fail(where + ".tie", fmt::format("tie group '{}' joins states of order {} ('{}') "
                                                   "and {}; tied states need the same order",
                                                   a.tie, b.order, b.name, a.order));
            if (std::abs(a.gc.mean - b.gc.mean) > tie_tolerance ||
                std::abs(a.gc.dispersion - b.gc.dispersion) > tie_tolerance)
                v.fail(where + ".tie",
                       fmt::format("tie group '{}': gc differs from '{}'; tied states must "
                                   "carry identical emissions",
                                   a.tie, b.name));
            if (a.signature.k != b.signature.k || a.signature.mean != b.signature.mean ||
                a.signature.concentration != b.signature.concentration)
                v.fail(where + ".tie",
                       fmt::format("tie group '{}': signature differs from '{}'; tied states must "
                                   "carry identical emissions",
                                   a.tie, b.name));
            for (size_t r = 0; r < a.emissions.size(); ++r)
                for (int c = 0; c < 4; ++c)
                    if (std::abs(a.emissions[r][c] - b.emissions[r][c]) > tie_tolerance)
                        v.fail(
                            where + ".tie",
                            fmt::format("tie group '{}': emissions[{}][{}] is {} here but {} in "
                                        "'{}'; tied states must carry identical emissions",
                                        a.tie, r, c, a.emissions[r][c], b.emissions[r][c], b.name));
            break;  // equal to the first member found, hence to all of them
        }
    }
}

// A min_length chain needs a way to stay inside the region, and the expanded model must fit
// the decoders' dense transition matrix.
void check_chains(const Profile& p, const Validator& v) {
    int64_t compiled = 0;
    for (size_t i = 0; i < p.states.size(); ++i) {
        const StateSpec& s = p.states[i];
        const RegionSpec& r = p.regions[s.region];
        compiled += p.chain_length(s.region);
        // (window profiles: a min_length within one window needs no chain)
        if (p.chain_length(s.region) <= 1) continue;
        double stay = 0;
        for (size_t j = 0; j < p.states.size(); ++j)
            if (p.states[j].region == s.region) stay += p.transitions[i][j];
        if (!(stay > 0))
            v.fail("transitions." + s.name,
                   fmt::format("region '{}' has min_length {} but state '{}' has no transition to "
                               "a state of that region, so no segment could reach that length",
                               r.name, r.min_length, s.name));
    }
    if (compiled > max_compiled_states)
        v.fail("regions",
               fmt::format("the min_length chains expand the model to {} states; at most {} "
                           "are supported (lower min_length)",
                           compiled, max_compiled_states));
}

std::string read_file(const std::string& path) {
    struct stat st {};
    if (stat(path.c_str(), &st) == 0 && S_ISDIR(st.st_mode))
        throw ProfileError(path + ": is a directory, not a profile file");
    std::ifstream in(path, std::ios::binary);
    if (!in) throw ProfileError(path + ": cannot open profile file");
    std::ostringstream text;
    text << in.rdbuf();
    return text.str();
}

}  // namespace

int64_t Profile::chain_length(int r) const {
    // min_length is at least 1; ceil(bases / window_size) written so that it cannot overflow
    const int64_t bases = regions.at(r).min_length;
    return window_size > 0 ? (bases - 1) / window_size + 1 : bases;
}

int Profile::state_index(std::string_view state) const {
    for (size_t i = 0; i < states.size(); ++i)
        if (states[i].name == state) return static_cast<int>(i);
    return -1;
}

int Profile::region_index(std::string_view region) const {
    for (size_t i = 0; i < regions.size(); ++i)
        if (regions[i].name == region) return static_cast<int>(i);
    return -1;
}

// contig_screen: centre, precision and limits as fit wrote them (contig_screen.hpp).
ContigScreen parse_contig_screen(const Validator& v, const json& j) {
    v.only_fields(j, "contig_screen", {"center", "precision", "limits"});
    const size_t n = screen_dimensions;
    const auto finite = [&](const json& x, const std::string& where) {
        if (!x.is_number() || !std::isfinite(x.get<double>()))
            v.fail(where, "must be a finite number");
        return x.get<double>();
    };
    ContigScreen out;
    const json& c = v.field(j, "center", "contig_screen");
    if (!c.is_array() || c.size() != n)
        v.fail("contig_screen.center", fmt::format("must be an array of {} numbers", n));
    for (size_t i = 0; i < n; ++i)
        out.center.push_back(finite(c[i], fmt::format("contig_screen.center[{}]", i)));
    const json& p = v.field(j, "precision", "contig_screen");
    if (!p.is_array() || p.size() != n)
        v.fail("contig_screen.precision", fmt::format("must be {} rows of {} numbers", n, n));
    for (size_t i = 0; i < n; ++i) {
        if (!p[i].is_array() || p[i].size() != n)
            v.fail(fmt::format("contig_screen.precision[{}]", i),
                   fmt::format("must be an array of {} numbers", n));
        for (size_t k = 0; k < n; ++k)
            out.precision.push_back(
                finite(p[i][k], fmt::format("contig_screen.precision[{}][{}]", i, k)));
    }
    const json& l = v.field(j, "limits", "contig_screen");
    if (!l.is_array() || l.empty())
        v.fail("contig_screen.limits", "must be a non-empty array of {known_bases, distance}");
    for (size_t i = 0; i < l.size(); ++i) {
        const std::string at = fmt::format("contig_screen.limits[{}]", i);
        v.only_fields(l[i], at, {"known_bases", "distance"});
        const int64_t known =
            v.nonnegative_integer(v.field(l[i], "known_bases", at), at + ".known_bases");
        const double d = finite(v.field(l[i], "distance", at), at + ".distance");
        if (known < 1 || (!out.lengths.empty() && known <= out.lengths.back()))
            v.fail(at + ".known_bases", "must be positive and increase along the list");
        if (d <= 0) v.fail(at + ".distance", "must be positive");
        out.lengths.push_back(known);
        out.limits.push_back(d);
    }
    return out;
}

Profile parse_profile(std::string_view json_text, const std::string& origin) {
    Validator v(origin);
    json doc;
    try {
        doc = json::parse(json_text.begin(), json_text.end());
    } catch (const json::exception& e) {  // parse_error, and out_of_range for numbers like 1e999
        throw ProfileError(fmt::format("{}: invalid JSON: {}", origin, e.what()));
    }
    v.only_fields(doc, "top level",
                  {"format", "name", "description", "sources", "regions", "states", "initial",
                   "transitions", "calling", "provenance", "window", "template", "contig_screen"});
    Profile p;
    const std::string format = v.string_field(doc, "format", "top level");
    if (format != profile_format)
        v.fail("format",
               fmt::format("'{}' is not supported (expected '{}')", format, profile_format));
    p.name = v.string_field(doc, "name", "top level");
    if (p.name.empty()) v.fail("name", "must not be empty");
    if (doc.contains("description"))
        p.description = v.string_field(doc, "description", "top level");
    if (doc.contains("sources")) {
        const json& s = doc["sources"];
        if (!s.is_array()) v.fail("sources", "must be an array of strings");
        for (size_t i = 0; i < s.size(); ++i) {
            if (!s[i].is_string()) v.fail(fmt::format("sources[{}]", i), "must be a string");
            p.sources.push_back(s[i].get<std::string>());
        }
    }
    if (doc.contains("provenance")) {
        if (!doc["provenance"].is_object()) v.fail("provenance", "must be a JSON object");
        p.provenance_json = doc["provenance"].dump();
    }

    if (doc.contains("template")) {
        if (!doc["template"].is_boolean()) v.fail("template", "must be true or false");
        p.is_template = doc["template"].get<bool>();
    }
    if (doc.contains("contig_screen"))
        p.contig_screen = parse_contig_screen(v, doc["contig_screen"]);
    if (doc.contains("window")) {
        const json& w = doc["window"];
        v.only_fields(w, "window", {"size", "min_known"});
        p.window_size = v.nonnegative_integer(v.field(w, "size", "window"), "window.size");
        if (p.window_size < 1) v.fail("window.size", "must be at least 1 base");
        if (w.contains("min_known")) {
            p.window_min_known = v.nonnegative_integer(w["min_known"], "window.min_known");
            if (p.window_min_known < 1 || p.window_min_known > p.window_size)
                v.fail("window.min_known", fmt::format("must be from 1 to window.size ({}), not {}",
                                                       p.window_size, p.window_min_known));
        }
    }

    const json& regions = v.field(doc, "regions", "top level");
    if (!regions.is_array() || regions.empty()) v.fail("regions", "must be a non-empty array");
    for (size_t i = 0; i < regions.size(); ++i) {
        const std::string where = fmt::format("regions[{}]", i);
        v.only_fields(regions[i], where, {"name", "report", "description", "min_length", "color"});
        RegionSpec r;
        r.name = v.string_field(regions[i], "name", where);
        if (r.name.empty()) v.fail(where + ".name", "must not be empty");
        if (p.region_index(r.name) >= 0) v.fail(where, "duplicate region name '" + r.name + "'");
        const json& report = v.field(regions[i], "report", where);
        if (!report.is_boolean()) v.fail(where + ".report", "must be true or false");
        r.report = report.get<bool>();
        if (regions[i].contains("description"))
            r.description = v.string_field(regions[i], "description", where);
        if (regions[i].contains("color")) {
            r.color = v.string_field(regions[i], "color", where);
            int rgb[3] = {-1, -1, -1};
            char extra = 0;
            if (std::sscanf(r.color.c_str(), "%d,%d,%d%c", &rgb[0], &rgb[1], &rgb[2], &extra) !=
                    3 ||
                std::any_of(rgb, rgb + 3, [](int x) { return x < 0 || x > 255; }))
                v.fail(
                    where + ".color",
                    "must be \"R,G,B\" with three integers from 0 to 255, not '" + r.color + "'");
        }
        if (regions[i].contains("min_length")) {
            r.min_length = v.nonnegative_integer(regions[i]["min_length"], where + ".min_length");
            const int64_t unit = std::max<int64_t>(1, p.window_size);
            // The largest minimum, saturated: a huge window.size must not overflow it.
            const int64_t most = unit > std::numeric_limits<int64_t>::max() / max_compiled_states
                                     ? std::numeric_limits<int64_t>::max()
                                     : max_compiled_states * unit;
            if (r.min_length < 1 || r.min_length > most)
                v.fail(where + ".min_length",
                       fmt::format(
                           "must be from 1 to {} (each {} of the minimum is one compiled state)",
                           most, p.window_size > 0 ? "window" : "base"));
        }
        p.regions.push_back(std::move(r));
    }
    // One region alone may be unreported: a genome that is all one class (e.g. a fit that found
    // no shifted class in it) has nothing to call.
    if (p.regions.size() > 1 && std::none_of(p.regions.begin(), p.regions.end(),
                                             [](const RegionSpec& r) { return r.report; }))
        v.fail("regions", "no region has \"report\": true, so nothing would be called");

    const json& states = v.field(doc, "states", "top level");
    if (!states.is_array() || states.empty()) v.fail("states", "must be a non-empty array");
    for (size_t i = 0; i < states.size(); ++i) {
        std::string where = fmt::format("states[{}]", i);
        // The two emission kinds, each named in the error when the other's fields appear.
        if (p.window_size > 0) {
            for (const char* key : {"order", "emissions"})
                if (states[i].contains(key))
                    v.fail(fmt::format("{}.{}", where, key),
                           "a window profile (window.size is set) gives each state 'gc' and/or "
                           "'signature', not 'order' and 'emissions'");
            v.only_fields(states[i], where,
                          {"name", "region", "gc", "signature", "description", "tie"});
        } else {
            for (const char* key : {"gc", "signature"})
                if (states[i].contains(key))
                    v.fail(fmt::format("{}.{}", where, key),
                           fmt::format("'{}' emissions need a window profile (set window.size), "
                                       "per-base states give 'order' and 'emissions'",
                                       key));
            v.only_fields(states[i], where,
                          {"name", "region", "order", "emissions", "description", "tie"});
        }
        StateSpec s;
        s.name = v.string_field(states[i], "name", where);
        if (s.name.empty()) v.fail(where + ".name", "must not be empty");
        where += " ('" + s.name + "')";
        if (p.state_index(s.name) >= 0) v.fail(where, "duplicate state name");
        const std::string region = v.string_field(states[i], "region", where);
        s.region = p.region_index(region);
        if (s.region < 0) v.fail(where + ".region", "names unknown region '" + region + "'");
        if (p.window_size > 0 && states[i].contains("signature"))
            s.signature = parse_signature(v, states[i]["signature"], where + ".signature");
        if (p.window_size > 0 && !states[i].contains("gc")) {
            if (!s.signature.present())
                v.fail(where, "missing required field 'gc' (or 'signature')");
            s.has_gc = false;
        } else if (p.window_size > 0) {
            const json& gc = v.field(states[i], "gc", where);
            v.only_fields(gc, where + ".gc", {"mean", "dispersion", "below", "above"});
            if (gc.contains("below") && gc.contains("above"))
                v.fail(where + ".gc", "give 'below' or 'above', not both");
            for (const auto& [key, side] : {std::pair{"below", -1}, std::pair{"above", 1}})
                if (gc.contains(key)) {
                    s.gc_reference = v.string_field(gc, key, where + ".gc");
                    s.gc_side = side;
                }
            const auto open_unit = [&](const char* key) {
                const json& x = v.field(gc, key, where + ".gc");
                const std::string at = where + ".gc." + key;
                if (!x.is_number()) v.fail(at, "must be a number");
                const double value = x.get<double>();
                if (!(value > 0 && value < 1))
                    v.fail(at, fmt::format("must lie strictly between 0 and 1, not {}", value));
                return value;
            };
            s.gc.mean = open_unit("mean");
            s.gc.dispersion = open_unit("dispersion");
            // compile() derives alpha = mean (1/rho - 1) and beta = (1 - mean)(1/rho - 1): a rho
            // whose inverse overflows, or a mean that makes one of them 0, is no distribution.
            const double total = 1.0 / s.gc.dispersion - 1.0;
            const double alpha = s.gc.mean * total, beta = (1.0 - s.gc.mean) * total;
            if (!(std::isfinite(total) && alpha > 0 && beta > 0))
                v.fail(where + ".gc",
                       fmt::format("mean {} and dispersion {} give beta-binomial alpha {} and beta "
                                   "{}; both must be positive and finite",
                                   s.gc.mean, s.gc.dispersion, alpha, beta));
        } else {
            const json& order = v.field(states[i], "order", where);
            if (!order.is_number_integer() || order.get<int64_t>() < 0 ||
                order.get<int64_t>() > max_emission_order)
                v.fail(where + ".order",
                       fmt::format("must be an integer from 0 to {}", max_emission_order));
            s.order = order.get<int>();
            const json& rows = v.field(states[i], "emissions", where);
            const size_t expected = size_t{1} << (2 * s.order);
            if (!rows.is_array() || rows.size() != expected)
                v.fail(where + ".emissions",
                       fmt::format("must be an array of {} rows (4^order) of 4 probabilities",
                                   expected));
            for (size_t r = 0; r < rows.size(); ++r) {
                const std::string rw = fmt::format("{}.emissions[{}]", where, r);
                if (!rows[r].is_array() || rows[r].size() != 4)
                    v.fail(rw, "must be 4 probabilities P(A), P(C), P(G), P(T)");
                std::array<double, 4> row{};
                double sum = 0;
                for (int b = 0; b < 4; ++b) {
                    row[b] = v.probability(rows[r][b], fmt::format("{}[{}]", rw, b));
                    sum += row[b];
                }
                v.sums_to_one(sum, rw);
                s.emissions.push_back(row);
            }
        }
        if (states[i].contains("tie")) {
            s.tie = v.string_field(states[i], "tie", where);
            if (s.tie.empty()) v.fail(where + ".tie", "must not be empty (omit the field instead)");
        }
        p.states.push_back(std::move(s));
    }
    check_ties(p, v);
    check_window_kinds(p, v);
    check_gc_order(p, v);
    for (size_t r = 0; r < p.regions.size(); ++r)
        if (std::none_of(p.states.begin(), p.states.end(),
                         [&](const StateSpec& s) { return s.region == static_cast<int>(r); }))
            v.fail(fmt::format("regions[{}] ('{}')", r, p.regions[r].name), "has no state");

    const size_t S = p.states.size();
    const json& initial = v.field(doc, "initial", "top level");
    if (!initial.is_object())
        v.fail("initial", "must be an object mapping state names to probabilities");
    p.initial.assign(S, 0.0);
    double isum = 0;
    for (const auto& [name, value] : initial.items()) {
        const int s = p.state_index(name);
        if (s < 0) v.fail("initial", "names unknown state '" + name + "'");
        p.initial[s] = v.probability(value, "initial." + name);
        isum += p.initial[s];
    }
    v.sums_to_one(isum, "initial");

    const json& trans = v.field(doc, "transitions", "top level");
    if (!trans.is_object()) v.fail("transitions", "must be an object of objects");
    p.transitions.assign(S, std::vector<double>(S, 0.0));
    for (const auto& [from, row] : trans.items()) {
        const int i = p.state_index(from);
        if (i < 0) v.fail("transitions", "names unknown state '" + from + "'");
        if (!row.is_object()) v.fail("transitions." + from, "must be an object");
        for (const auto& [to, value] : row.items()) {
            const int j = p.state_index(to);
            if (j < 0) v.fail("transitions." + from, "names unknown target state '" + to + "'");
            p.transitions[i][j] = v.probability(value, "transitions." + from + "." + to);
        }
    }
    for (size_t i = 0; i < S; ++i) {
        double sum = 0;
        for (double x : p.transitions[i]) sum += x;
        v.sums_to_one(sum, "transitions." + p.states[i].name);
    }
    check_chains(p, v);

    if (doc.contains("calling")) {
        const json& c = doc["calling"];
        v.only_fields(c, "calling", {"min_posterior", "min_length", "merge_gap", "refine_ends"});
        if (c.contains("min_posterior")) {
            p.calling.min_posterior = v.probability(c["min_posterior"], "calling.min_posterior");
            if (p.calling.min_posterior <= 0) v.fail("calling.min_posterior", "must be above 0");
        }
        if (c.contains("min_length"))
            p.calling.min_length = v.nonnegative_integer(c["min_length"], "calling.min_length");
        if (c.contains("merge_gap"))
            p.calling.merge_gap = v.nonnegative_integer(c["merge_gap"], "calling.merge_gap");
        if (c.contains("refine_ends")) {
            if (!c["refine_ends"].is_boolean())
                v.fail("calling.refine_ends", "must be true or false");
            p.calling.refine_ends = c["refine_ends"].get<bool>();
            if (p.calling.refine_ends && p.window_size == 0)
                v.fail("calling.refine_ends",
                       "applies to window profiles (window.size): per-base profiles call at base "
                       "resolution already");
        }
    }
    return p;
}

std::string to_json(const Profile& p) {
    ordered_json doc;
    doc["format"] = profile_format;
    doc["name"] = p.name;
    if (!p.description.empty()) doc["description"] = p.description;
    doc["sources"] = p.sources;
    if (p.is_template) doc["template"] = true;
    if (p.window_size > 0) doc["window"] = {{"size", p.window_size}};
    if (p.window_min_known > 1) doc["window"]["min_known"] = p.window_min_known;
    doc["regions"] = ordered_json::array();
    for (const auto& r : p.regions) {
        ordered_json o;
        o["name"] = r.name;
        o["report"] = r.report;
        if (!r.description.empty()) o["description"] = r.description;
        if (!r.color.empty()) o["color"] = r.color;
        if (r.min_length > 1) o["min_length"] = r.min_length;
        doc["regions"].push_back(o);
    }
    doc["states"] = ordered_json::array();
    for (const auto& s : p.states) {
        ordered_json o;
        o["name"] = s.name;
        o["region"] = p.regions[s.region].name;
        if (p.window_size > 0) {
            if (!s.tie.empty()) o["tie"] = s.tie;
            if (s.has_gc) {
                o["gc"] = {{"mean", s.gc.mean}, {"dispersion", s.gc.dispersion}};
                if (!s.gc_reference.empty())
                    o["gc"][s.gc_side < 0 ? "below" : "above"] = s.gc_reference;
            }
            if (s.signature.present()) {
                ordered_json sig;
                sig["k"] = s.signature.k;
                const auto& conc = s.signature.concentration;
                if (std::all_of(conc.begin(), conc.end(), [&](double x) { return x == conc[0]; }))
                    sig["concentration"] = conc[0];
                else
                    sig["concentration"] = conc;
                sig["mean"] = s.signature.mean;
                if (!s.signature.concentration_reference.empty())
                    sig["concentration_below"] = s.signature.concentration_reference;
                o["signature"] = sig;
            }
            doc["states"].push_back(o);
            continue;
        }
        o["order"] = s.order;
        if (!s.tie.empty()) o["tie"] = s.tie;
        o["emissions"] = s.emissions;
        doc["states"].push_back(o);
    }
    ordered_json init = ordered_json::object();
    for (size_t i = 0; i < p.states.size(); ++i)
        if (p.initial[i] > 0) init[p.states[i].name] = p.initial[i];
    doc["initial"] = init;
    ordered_json trans = ordered_json::object();
    for (size_t i = 0; i < p.states.size(); ++i) {
        ordered_json row = ordered_json::object();
        for (size_t j = 0; j < p.states.size(); ++j)
            if (p.transitions[i][j] > 0) row[p.states[j].name] = p.transitions[i][j];
        trans[p.states[i].name] = row;
    }
    doc["transitions"] = trans;
    doc["calling"] = {{"min_posterior", p.calling.min_posterior},
                      {"min_length", p.calling.min_length},
                      {"merge_gap", p.calling.merge_gap}};
    if (p.calling.refine_ends) doc["calling"]["refine_ends"] = true;
    if (p.contig_screen.present()) {
        const ContigScreen& cs = p.contig_screen;
        const size_t n = cs.center.size();
        ordered_json rows = ordered_json::array(), limits = ordered_json::array();
        for (size_t i = 0; i < n; ++i)
            rows.push_back(
                std::vector<double>(cs.precision.begin() + static_cast<ptrdiff_t>(i * n),
                                    cs.precision.begin() + static_cast<ptrdiff_t>((i + 1) * n)));
        for (size_t i = 0; i < cs.lengths.size(); ++i)
            limits.push_back({{"known_bases", cs.lengths[i]}, {"distance", cs.limits[i]}});
        doc["contig_screen"] = {{"center", cs.center}, {"precision", rows}, {"limits", limits}};
    }
    if (!p.provenance_json.empty()) doc["provenance"] = ordered_json::parse(p.provenance_json);
    return doc.dump(2) + "\n";
}

std::string profile_checksum(const Profile& profile) {
    const std::string text = to_json(profile);
    const uLong crc = crc32(crc32(0L, Z_NULL, 0), reinterpret_cast<const Bytef*>(text.data()),
                            static_cast<uInt>(text.size()));
    return fmt::format("{:08x}", crc);
}

void require_fitted(const Profile& p) {
    if (!p.is_template) return;
    throw ProfileError(fmt::format(
        "profile '{0}' is a template whose classes have not been fitted; fit it to your genome "
        "first ('tidemark fit GENOME.fa -p {0} -o P.json'), then scan with '-p P.json'",
        p.name));
}

Profile load_profile(const std::string& name_or_path) {
    for (const auto& b : builtin_profiles())
        if (b.name == name_or_path)
            return parse_profile(b.json, "built-in profile '" + std::string(b.name) + "'");
    struct stat st {};
    if (stat(name_or_path.c_str(), &st) != 0) {
        std::string names;
        std::vector<std::string> builtins;
        for (const auto& b : builtin_profiles()) {
            names += (names.empty() ? "" : ", ") + std::string(b.name);
            builtins.emplace_back(b.name);
        }
        throw ProfileError(
            fmt::format("'{}' is neither a built-in profile ({}) nor a readable file{}",
                        name_or_path, names, did_you_mean(name_or_path, builtins)));
    }
    return parse_profile(read_file(name_or_path), name_or_path);
}

Model compile(const Profile& p) {
    Model m;
    const int P = static_cast<int>(p.states.size());
    m.name = p.name;
    for (const auto& r : p.regions) {
        m.region_names.push_back(r.name);
        m.region_report.push_back(r.report);
        m.region_colors.push_back(r.color);
    }
    // Compiled state of copy c (1-based) of profile state s: states are laid out state by
    // state, the copies of one state consecutive.
    std::vector<int> first(P + 1, 0);
    for (int s = 0; s < P; ++s)
        first[s + 1] = first[s] + static_cast<int>(p.chain_length(p.states[s].region));
    const int S = first[P];
    m.states = S;
    m.transitions.assign(static_cast<size_t>(S) * S, 0.0);
    m.initial.assign(S, 0.0);
    std::vector<size_t> table_offset;
    std::vector<double> tables;
    for (const auto& s : p.states) {
        table_offset.push_back(tables.size());
        std::array<double, 4> mean{};
        for (const auto& row : s.emissions)
            for (int b = 0; b < 4; ++b) {
                tables.push_back(row[b]);
                mean[b] += row[b] / static_cast<double>(s.emissions.size());
            }
        tables.insert(tables.end(), mean.begin(), mean.end());
    }
    m.emission = std::move(tables);
    m.window = p.window_size;
    m.window_min_known = p.window_min_known;
    m.refine_ends = p.calling.refine_ends;
    if (p.contig_screen.present())
        m.contig_screen = std::make_shared<const ContigScreen>(p.contig_screen);
    if (p.window_size > 0) {
        m.window_gc = p.states.front().has_gc;
        m.signature_k = p.states.front().signature.k;
    }
    for (int s = 0; s < P; ++s) {
        const StateSpec& st = p.states[s];
        const int L = first[s + 1] - first[s];
        double stay = 0;  // in-region transition mass, the chain's normaliser
        for (int u = 0; u < P; ++u)
            if (p.states[u].region == st.region) stay += p.transitions[s][u];
        m.initial[first[s]] = p.initial[s];
        for (int c = 1; c <= L; ++c) {
            const int from = first[s] + c - 1;
            m.state_names.push_back(L == 1 ? st.name : fmt::format("{}[{}/{}]", st.name, c, L));
            m.region_of_state.push_back(st.region);
            m.order_of_state.push_back(st.order);
            m.profile_state.push_back(s);
            m.chain_copy.push_back(c);
            m.chain_length.push_back(L);
            m.emission_offset.push_back(table_offset[s]);
            if (p.window_size > 0 && st.signature.present())
                for (size_t ctx = 0; ctx < st.signature.mean.size(); ++ctx)
                    for (int b = 0; b < 4; ++b)
                        m.sig_alpha.push_back(st.signature.concentration[ctx] *
                                              st.signature.mean[ctx][b]);
            if (p.window_size > 0) {
                const double total = 1.0 / st.gc.dispersion - 1.0;
                const double a = st.gc.mean * total, b = (1.0 - st.gc.mean) * total;
                m.gc_alpha.push_back(a);
                m.gc_beta.push_back(b);
                m.gc_lbeta.push_back(std::lgamma(a) + std::lgamma(b) - std::lgamma(a + b));
            }
            double* row = m.transitions.data() + static_cast<size_t>(from) * S;
            for (int u = 0; u < P; ++u) {
                const double a = p.transitions[s][u];
                if (!(a > 0)) continue;
                const bool same = p.states[u].region == st.region;
                if (c < L) {
                    if (same) row[first[u] + c] = a / stay;  // forced step to copy c+1
                } else {
                    // the tail: stay in the tail copies, or enter another region at its copy 1
                    const int Lu = first[u + 1] - first[u];
                    row[same ? first[u] + Lu - 1 : first[u]] += a;
                }
            }
        }
        m.max_order = std::max(m.max_order, st.order);
    }
    m.in_begin.push_back(0);
    m.out_begin.push_back(0);
    for (int j = 0; j < S; ++j) {
        for (int i = 0; i < S; ++i)
            if (m.transitions[static_cast<size_t>(i) * S + j] > 0) {
                m.in_from.push_back(i);
                m.in_prob.push_back(m.transitions[static_cast<size_t>(i) * S + j]);
            }
        m.in_begin.push_back(static_cast<int>(m.in_from.size()));
    }
    for (int i = 0; i < S; ++i) {
        for (int j = 0; j < S; ++j)
            if (m.transitions[static_cast<size_t>(i) * S + j] > 0) {
                m.out_to.push_back(j);
                m.out_prob.push_back(m.transitions[static_cast<size_t>(i) * S + j]);
            }
        m.out_begin.push_back(static_cast<int>(m.out_to.size()));
    }
    return m;
}

}  // namespace tidemark
