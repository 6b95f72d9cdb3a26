// Window signatures (WindowSignature in profile.hpp, the signature functions of window.hpp and
// the signature M-step behind train.hpp's maximise): parsing and its errors, the window
// likelihood against the Polya urn over every sequence of tiny windows (and its sum over them),
// the large-concentration branch against the urn in long double, and Baum-Welch: the likelihood
// never decreases, concentration_below holds, and the fit does not depend on the thread count.
#include <catch2/catch.hpp>
#include <cmath>
#include <functional>
#include <nlohmann/json.hpp>
#include <tuple>

#include "test_util.hpp"
#include "tidemark/call.hpp"
#include "tidemark/error.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/simulate.hpp"
#include "tidemark/train.hpp"
#include "tidemark/window.hpp"
#include "train_sim.hpp"

using namespace tidemark;
using json = nlohmann::json;

namespace {

// Mean rows that differ by context and base (a fixed pattern, each row summing to 1).
json mean_rows(int k, int shift) {
    json rows = json::array();
    for (int c = 0; c < (1 << (2 * (k - 1))); ++c) {
        double w[4], total = 0;
        for (int b = 0; b < 4; ++b) total += w[b] = 1 + ((c * 7 + b * 3 + shift) % 5);
        rows.push_back({w[0] / total, w[1] / total, w[2] / total, w[3] / total});
    }
    return rows;
}

// Two classes: "atypical" (low concentration, below typical's) and "typical" (a concentration
// per context).
json signature_profile(int k, int64_t window, double low, double high, bool with_gc = false) {
    json conc = json::array();
    for (int c = 0; c < (1 << (2 * (k - 1))); ++c) conc.push_back(high * (1 + 0.1 * (c % 3)));
    json doc = {
        {"format", "tidemark-profile/1"},
        {"name", "sig"},
        {"window", {{"size", window}}},
        {"regions",
         {{{"name", "atypical"}, {"report", true}}, {{"name", "typical"}, {"report", false}}}},
        {"states",
         {{{"name", "atypical"},
           {"region", "atypical"},
           {"signature",
            {{"k", k},
             {"concentration", low},
             {"mean", mean_rows(k, 1)},
             {"concentration_below", "typical"}}}},
          {{"name", "typical"},
           {"region", "typical"},
           {"signature", {{"k", k}, {"concentration", conc}, {"mean", mean_rows(k, 0)}}}}}},
        {"initial", {{"atypical", 0.2}, {"typical", 0.8}}},
        {"transitions",
         {{"atypical", {{"atypical", 0.7}, {"typical", 0.3}}},
          {"typical", {{"atypical", 0.1}, {"typical", 0.9}}}}}};
    if (with_gc) {
        doc["states"][0]["gc"] = {{"mean", 0.45}, {"dispersion", 0.01}};
        doc["states"][1]["gc"] = {{"mean", 0.5}, {"dispersion", 0.002}};
    }
    return doc;
}

std::string error_for(const json& doc) {
    try {
        parse_profile(doc.dump(), "s.json");
    } catch (const ProfileError& e) {
        return e.what();
    }
    return "";
}

// The Polya urn (the Dirichlet's predictive rule; e.g. Minka 2000, "Estimating a Dirichlet
// distribution", section on the Polya distribution): along the sequence, base b after context c
// has probability (a_cb + n_cb) / (A_c + n_c) with n the counts of context c so far in the
// window; a base with fewer than k-1 known predecessors has 1/4. Sequential, in long double, no
// lgamma: an independent route to the probability of the sequence.
long double urn_log(const std::vector<int>& x, int k, const StateSpec& st) {
    const size_t contexts = size_t{1} << (2 * (k - 1));
    std::vector<std::array<long double, 4>> n(contexts, std::array<long double, 4>{});
    long double lp = 0;
    int run = 0;
    uint32_t code = 0;
    for (int base : x) {
        if (base == 4) {
            run = 0;
            code = 0;
            continue;
        }
        if (run >= k - 1) {
            const uint32_t c = k == 1 ? 0 : code & static_cast<uint32_t>(contexts - 1);
            long double total = 0;
            for (int b = 0; b < 4; ++b) total += n[c][b];
            const long double a = static_cast<long double>(st.signature.concentration[c]) *
                                  static_cast<long double>(st.signature.mean[c][base]);
            lp += std::log((a + n[c][base]) /
                           (static_cast<long double>(st.signature.concentration[c]) + total));
            n[c][base] += 1;
        } else {
            lp += std::log(0.25L);
        }
        code = (code << 2) | static_cast<uint32_t>(base);
        ++run;
    }
    return lp;
}

// The strand is a fair coin: P(x) = (urn(x) + urn(reverse complement of x)) / 2.
long double window_log(const std::vector<int>& x, int k, const StateSpec& st) {
    std::vector<int> rc(x.rbegin(), x.rend());
    for (int& b : rc)
        if (b != 4) b = 3 - b;
    const long double f = urn_log(x, k, st), r = urn_log(rc, k, st);
    const long double top = std::max(f, r);
    return top + std::log((std::exp(f - top) + std::exp(r - top)) / 2);
}

std::string letters(const std::vector<int>& x) {
    std::string s;
    for (int b : x) s += "ACGTN"[b];
    return s;
}

// A base (0..3) drawn from an order-0 state's mean frequencies.
int draw_base(test::TestRandom& rng, const StateSpec& st) {
    double u = static_cast<double>(rng.next() >> 11) / 9007199254740992.0;
    for (int b = 0; b < 3; ++b)
        if ((u -= st.signature.mean[0][static_cast<size_t>(b)]) < 0) return b;
    return 3;
}

}  // namespace

TEST_CASE("signature profiles parse, compile and round-trip", "[window][signature]") {
    const Profile p = parse_profile(signature_profile(3, 100, 5, 50).dump(), "s.json");
    REQUIRE(p.states[0].signature.k == 3);
    CHECK_FALSE(p.states[0].has_gc);
    CHECK(p.states[0].signature.concentration.size() == 16);
    CHECK(p.states[0].signature.concentration_reference == "typical");
    const Model m = compile(p);
    CHECK(m.signature_k == 3);
    CHECK_FALSE(m.window_gc);
    REQUIRE(m.sig_alpha.size() == 2 * 64);
    // alpha = concentration x mean (profile.hpp): state 1, context 5, base 2.
    CHECK(m.sig_alpha[64 + 5 * 4 + 2] ==
          p.states[1].signature.concentration[5] * p.states[1].signature.mean[5][2]);
    const Profile q = parse_profile(to_json(p), "round trip");
    CHECK(to_json(q) == to_json(p));
    CHECK(q.states[1].signature.concentration == p.states[1].signature.concentration);
    const Profile both = parse_profile(signature_profile(2, 100, 5, 50, true).dump(), "s.json");
    CHECK(both.states[0].has_gc);
    CHECK(compile(both).window_gc);
}

TEST_CASE("signature profiles: validation names the file and field", "[window][signature]") {
    struct Case {
        std::function<void(json&)> edit;
        std::string message;
    };
    const std::vector<Case> cases = {
        {[](json& d) { d["states"][0]["signature"]["k"] = 5; },
         "s.json: states[0] ('atypical').signature.k: must be an integer from 1 to 4"},
        {[](json& d) { d["states"][0]["signature"]["concentration"] = 0; },
         "states[0] ('atypical').signature.concentration: must be positive and finite, not 0"},
        {[](json& d) {
             d["states"][1]["signature"]["concentration"] = json::array({1, 2});
         },
         "states[1] ('typical').signature.concentration: must be one number or an array of 16"},
        {[](json& d) {
             d["states"][0]["signature"]["mean"][3] = {0.5, 0.5, 0.5, 0.5};
         },
         "states[0] ('atypical').signature.mean[3]: probabilities sum to 2"},
        {[](json& d) {
             d["states"][0]["signature"]["mean"][0] = {0.0, 0.5, 0.25, 0.25};
         },
         "states[0] ('atypical').signature.mean[0][0]: must be above 0"},
        {[](json& d) { d["states"][0]["signature"]["concentration"] = 1000; },
         "states[0] ('atypical').signature.concentration_below: concentration[0] 1000 is above"},
        {[](json& d) { d["states"][0]["signature"]["concentration_below"] = "nope"; },
         "signature.concentration_below: names unknown state 'nope'"},
        {[](json& d) { d["states"][0]["signature"]["kk"] = 1; },
         "states[0] ('atypical').signature: unknown field 'kk' (did you mean 'k'?)"},
        {[](json& d) { d["states"][1]["signature"] = json(); },
         "states[1] ('typical'): missing required field 'gc' (or 'signature')"},
        {[](json& d) {
             d["states"][1]["gc"] = {{"mean", 0.5}, {"dispersion", 0.01}};
         },
         "states[1] ('typical'): has 'gc' but states[0] ('atypical') has not"},
        {[](json& d) {
             d["states"][1]["signature"]["k"] = 2;
             d["states"][1]["signature"]["mean"] = mean_rows(2, 0);
             d["states"][1]["signature"]["concentration"] = 50;
         },
         "states[1] ('typical').signature: k is 2 but states[0] ('atypical') has k 3"},
    };
    for (const auto& c : cases) {
        json doc = signature_profile(3, 100, 5, 50);
        if (doc["states"][1]["signature"].is_null()) doc["states"][1].erase("signature");
        c.edit(doc);
        if (doc["states"][1].contains("signature") && doc["states"][1]["signature"].is_null())
            doc["states"][1].erase("signature");
        const std::string got = error_for(doc);
        INFO(got);
        CHECK(got.find(c.message) != std::string::npos);
    }
    // Per-base profiles have no signature.
    json per_base = json::parse(R"({"format": "tidemark-profile/1", "name": "b",
        "regions": [{"name": "r", "report": true}],
        "states": [{"name": "s", "region": "r", "order": 0, "emissions": [[0.25, 0.25, 0.25, 0.25]],
                    "signature": {"k": 1, "concentration": 1, "mean": [[0.25, 0.25, 0.25, 0.25]]}}],
        "initial": {"s": 1}, "transitions": {"s": {"s": 1}}})");
    CHECK(error_for(per_base).find("states[0].signature: 'signature' emissions need a window "
                                   "profile") != std::string::npos);
}

TEST_CASE("signature likelihood equals the Polya urn over every sequence of a tiny window",
          "[window][signature]") {
    // Every sequence of 6 bases (and of 6 with an unknown base at position 2, which breaks the
    // chain), k = 1, 2, 3: ln P from window.hpp against the urn (independent, long double) to
    // 1e-12 relative, and the probabilities of all sequences of one pattern sum to 1 (the model
    // is a distribution over the window's sequences: strand mixture, uniform chain starts).
    for (int k = 1; k <= 3; ++k)
        for (bool gap : {false, true}) {
            const Profile p = parse_profile(signature_profile(k, 6, 0.7, 4).dump(), "s.json");
            const Model m = compile(p);
            long double total[2] = {0, 0};
            double worst = 0;
            for (int code = 0; code < 4096; ++code) {
                std::vector<int> x(6);
                for (int i = 0; i < 6; ++i) x[i] = (code >> (2 * (5 - i))) & 3;
                if (gap) {
                    if (x[2] != 0) continue;  // one sequence per assignment of the 5 known bases
                    x[2] = 4;
                }
                const Contig c = test::contig_from(letters(x));
                const WindowCount w = window_count(m, c, 0);
                for (int s = 0; s < 2; ++s) {
                    const double got = signature_log_probability(m, s, w);
                    const long double want = window_log(x, k, p.states[s]);
                    worst =
                        std::max(worst, static_cast<double>(std::abs(got - want) / std::abs(want)));
                    total[s] += std::exp(want);
                }
            }
            INFO("k " << k << ", unknown base: " << gap);
            CHECK(worst <= 1e-12);
            CHECK(std::abs(static_cast<double>(total[0]) - 1) <= 1e-12);
            CHECK(std::abs(static_cast<double>(total[1]) - 1) <= 1e-12);
        }
}

TEST_CASE("signature likelihood at high concentration (Stirling branch) equals the urn",
          "[window][signature]") {
    test::TestRandom rng(11);
    std::string bases;
    for (int i = 0; i < 5000; ++i) bases += "ACGT"[rng.next() % 4];
    bases[1200] = 'N';
    for (double high : {30.0, 1e3, 1e5, 1e7}) {
        const Profile p = parse_profile(signature_profile(3, 5000, 2, high).dump(), "s.json");
        const Model m = compile(p);
        const Contig c = test::contig_from(bases);
        const WindowCount w = window_count(m, c, 0);
        std::vector<int> x;
        for (char ch : bases) x.push_back(ch == 'N' ? 4 : std::string("ACGT").find(ch));
        const double got = signature_log_probability(m, 1, w);
        const long double want = window_log(x, 3, p.states[1]);
        INFO("concentration " << high << ": " << got << " vs " << static_cast<double>(want));
        CHECK(std::abs(got - want) / std::abs(want) <= 1e-12);
    }
}

namespace {

// A host chain and a foreign chain of order 2 with (nearly) the same G+C, as sequences: host,
// then 30-kb foreign inserts every 150 kb.
std::string chimera(uint64_t seed) {
    test::TestRandom rng(seed);
    const auto chain = [&](double skew) {
        std::vector<std::array<double, 4>> rows(16);
        for (auto& r : rows) {
            const double x = 0.5 + skew * (rng.uniform() - 0.5);
            const double y = 0.5 + skew * (rng.uniform() - 0.5);
            r = {x / 2, (1 - y) / 2, y / 2, (1 - x) / 2};
        }
        return rows;
    };
    const auto host = chain(0.3), foreign = chain(1.2);
    std::string out;
    uint32_t code = 0;
    for (int64_t i = 0; i < 600000; ++i) {
        const bool away = i % 150000 >= 100000 && i % 150000 < 130000;
        const auto& r = (away ? foreign : host)[code & 15];
        const double u = rng.uniform();
        int b = 0;
        for (double cum = r[0]; b < 3 && u >= cum; cum += r[++b]) {
        }
        out += "ACGT"[b];
        code = (code << 2) | static_cast<uint32_t>(b);
    }
    return out;
}

}  // namespace

TEST_CASE(
    "Baum-Welch with signatures never lowers the likelihood, keeps concentration_below "
    "and does not depend on the thread count",
    "[train][signature]") {
    // EM's guarantee (Dempster, Laird & Rubin 1977): baum_welch throws when log-likelihood plus
    // log-prior falls between iterations; the history is checked here as well.
    for (bool with_gc : {false, true}) {
        const Profile start =
            parse_profile(signature_profile(3, 2000, 20, 400, with_gc).dump(), "s.json");
        const auto fit = [&](int threads) {
            std::vector<Contig> contigs;
            contigs.push_back(test::contig_from(chimera(5)));
            MemoryTrainingData data(std::move(contigs));
            FitOptions o;
            o.max_iter = 12;
            o.tol = 0;
            o.threads = threads;
            return baum_welch(start, data, o, Logger(LogLevel::quiet));
        };
        const FitResult one = fit(1);
        INFO("with gc: " << with_gc);
        REQUIRE(one.history.size() >= 5);
        for (size_t i = 1; i < one.history.size(); ++i)
            CHECK(one.history[i].objective >=
                  one.history[i - 1].objective - 1e-12 * std::abs(one.history[i - 1].objective));
        CHECK(one.history.back().log_likelihood > one.history.front().log_likelihood);
        const auto& a = one.profile.states[0].signature;
        const auto& t = one.profile.states[1].signature;
        for (size_t c = 0; c < a.concentration.size(); ++c)
            CHECK(a.concentration[c] <= t.concentration[c]);
        CHECK(to_json(fit(2).profile) == to_json(one.profile));
    }
}

namespace {

// Collects the bases of a simulation.
class BaseCollector final : public SimulationSink {
public:
    void block(const SimulatedBlock& b) override {
        bases.insert(bases.end(), b.bases, b.bases + b.size);
    }
    std::vector<uint8_t> bases;
};

}  // namespace

TEST_CASE("simulate draws signature windows with the model's moments", "[simulate][signature]") {
    // k = 1 (one context), mean (0.1, 0.2, 0.3, 0.4), concentration A = 50, windows of n = 1000
    // bases. On the forward strand a window's A count is beta-binomial with mean n m and variance
    // n m (1 - m) (A + n) / (A + 1) (the Dirichlet-multinomial's marginal; Johnson, Kotz &
    // Balakrishnan 1997, Discrete Multivariate Distributions, ch. 35, from memory); on the
    // reverse strand (probability 1/2) the A count is the forward T count. So the A fraction f has
    // E f = (0.1 + 0.4) / 2 and E f^2 = the average of V_m + m^2 over m = 0.1 and 0.4, with
    // V_m = m (1 - m) (A + n) / (n (A + 1)) the variance of the fraction. Tolerance: 4 standard
    // errors of the means over the 4,000 simulated windows.
    json doc = signature_profile(1, 1000, 50, 50);
    doc["states"][0]["signature"] = {
        {"k", 1}, {"concentration", 50}, {"mean", {{0.1, 0.2, 0.3, 0.4}}}};
    doc["states"][1]["signature"] = {
        {"k", 1}, {"concentration", 50}, {"mean", {{0.1, 0.2, 0.3, 0.4}}}};
    const Model m = compile(parse_profile(doc.dump(), "s.json"));
    SimulateOptions o;
    o.lengths = {4000000};
    o.seed = 9;
    BaseCollector sink;
    simulate(m, o, sink);
    REQUIRE(sink.bases.size() == 4000000);
    const double n = 1000, A = 50;
    std::vector<double> f;
    for (size_t w = 0; w < 4000; ++w) {
        double a = 0;
        for (size_t i = 0; i < 1000; ++i) a += sink.bases[w * 1000 + i] == base_a;
        f.push_back(a / n);
    }
    const auto moments = [&](int power) {
        double s = 0, s2 = 0;
        for (double x : f) {
            const double v = std::pow(x, power);
            s += v;
            s2 += v * v;
        }
        const double mean = s / f.size();
        return std::pair{mean, std::sqrt((s2 / f.size() - mean * mean) / f.size())};
    };
    const auto [m1, se1] = moments(1);
    const auto [m2, se2] = moments(2);
    const auto second = [&](double p) { return p * (1 - p) * (A + n) / (n * (A + 1)) + p * p; };
    INFO("E f " << m1 << " +- " << se1 << ", E f^2 " << m2 << " +- " << se2);
    CHECK(std::abs(m1 - 0.25) <= 4 * se1);
    CHECK(std::abs(m2 - (second(0.1) + second(0.4)) / 2) <= 4 * se2);
    // The product of a gc and a signature emission is no generative model: refused.
    const Model joint =
        compile(parse_profile(signature_profile(2, 100, 5, 50, true).dump(), "s.json"));
    CHECK_THROWS_AS(simulate(joint, o, sink), ProfileError);
}

namespace {

// One stretch [a, b) of x under one state, independently of window.cpp: the k-mers ending in the
// stretch whose k - 1 predecessors (taken from the whole sequence) are known, drawn through the
// Polya urn (see urn_log) on each strand, the reverse strand read backwards (reverse complement
// k-mers from b down to a: the urn's exchangeability is part of what is checked), mixed with a
// fair coin, times the stretch's G+C bases drawn through the beta-binomial urn ((alpha + g) /
// (alpha + beta + n) for G or C after g of them among n); long double.
long double stretch_log(const std::vector<int>& x, int64_t a, int64_t b, int k, const StateSpec& st,
                        bool with_gc) {
    const size_t contexts = size_t{1} << (2 * (k - 1));
    const auto kmer_at = [&](int64_t i) -> long {
        if (x[static_cast<size_t>(i)] == 4 || i < k - 1) return -1;
        long code = 0;
        for (int64_t j = i - k + 1; j <= i; ++j) {
            if (x[static_cast<size_t>(j)] == 4) return -1;
            code = code * 4 + x[static_cast<size_t>(j)];
        }
        return code;
    };
    const auto draw = [&](std::vector<std::array<long double, 4>>& n, long code) {
        const size_t c = static_cast<size_t>(code / 4);
        const int base = static_cast<int>(code % 4);
        long double total = 0;
        for (int j = 0; j < 4; ++j) total += n[c][j];
        const long double conc = st.signature.concentration[c];
        const long double p =
            (conc * static_cast<long double>(st.signature.mean[c][base]) + n[c][base]) /
            (conc + total);
        n[c][base] += 1;
        return std::log(p);
    };
    std::vector<std::array<long double, 4>> nf(contexts, std::array<long double, 4>{}),
        nr(contexts, std::array<long double, 4>{});
    long double f = 0, r = 0;
    for (int64_t i = a; i < b; ++i)
        if (const long code = kmer_at(i); code >= 0) f += draw(nf, code);
    for (int64_t i = b - 1; i >= a; --i)
        if (const long code = kmer_at(i); code >= 0) {
            long rc = 0, v = code;
            for (int j = 0; j < k; ++j, v /= 4) rc = rc * 4 + (3 - v % 4);
            r += draw(nr, rc);
        }
    const long double top = std::max(f, r);
    long double lp = top + std::log((std::exp(f - top) + std::exp(r - top)) / 2);
    if (with_gc) {
        const long double total = 1 / static_cast<long double>(st.gc.dispersion) - 1;
        const long double alpha = st.gc.mean * total, beta = total - alpha;
        long double g = 0, n = 0;
        for (int64_t i = a; i < b; ++i) {
            const int base = x[static_cast<size_t>(i)];
            if (base == 4) continue;
            const bool strong = base == 1 || base == 2;
            lp += std::log((strong ? alpha + g : beta + (n - g)) / (alpha + beta + n));
            g += strong;
            n += 1;
        }
    }
    return lp;
}

}  // namespace

TEST_CASE("refined ends of signature models: split scores equal the urn on each side",
          "[window][signature][call_ends]") {
    // Random sequences with an unknown base; a region of two states (the equal mixture of their
    // stretch likelihoods) against one of one state; k = 1..3, with and without a G+C term, the
    // stretches inside the search range or reaching beyond it:
    // ClassBaseScores::split_scores against stretch_log (independent, long double) at every
    // split to 1e-12 relative, and change_point at the largest of them.
    test::TestRandom rng(21);
    for (int k = 1; k <= 3; ++k)
        for (bool with_gc : {false, true}) {
            json doc = signature_profile(k, 100, 3, 40, with_gc);
            json broad = doc["states"][1];
            broad["name"] = "typical_broad";
            broad["signature"]["mean"] = mean_rows(k, 2);
            broad["signature"]["concentration"] = 8;
            broad["signature"]["concentration_below"] = "typical";
            if (with_gc) broad["gc"] = {{"mean", 0.6}, {"dispersion", 0.02}};
            doc["states"].push_back(broad);
            doc["initial"] = {{"atypical", 0.2}, {"typical", 0.4}, {"typical_broad", 0.4}};
            doc["transitions"] = {
                {"atypical", {{"atypical", 0.7}, {"typical", 0.2}, {"typical_broad", 0.1}}},
                {"typical", {{"atypical", 0.1}, {"typical", 0.8}, {"typical_broad", 0.1}}},
                {"typical_broad", {{"atypical", 0.1}, {"typical", 0.1}, {"typical_broad", 0.8}}}};
            doc["calling"] = {{"refine_ends", true}};
            const Profile p = parse_profile(doc.dump(), "s.json");
            const Model m = compile(p);
            const ClassBaseScores scores(m);
            std::vector<int> x(160);
            for (int& b : x) b = static_cast<int>(rng.next() % 4);
            x[70] = 4;
            const Contig c = test::contig_from(letters(x));
            const int64_t begin = 30, end = 150, n = end - begin;
            // The stretches reach out to 10 and 160 (left_from, right_to) or stay inside.
            for (const auto& [left, right, from, to] :
                 {std::tuple{0, 1, begin, end}, std::tuple{1, 0, begin, end},
                  std::tuple{0, 1, int64_t{10}, int64_t{160}}}) {
                std::vector<double> got(static_cast<size_t>(n + 1));
                scores.split_scores(c, begin, end, left, right, got.data(), from, to);
                double worst = 0;
                int64_t best = 0;
                for (int64_t j = 0; j <= n; ++j) {
                    // region 0: atypical (state 0); region 1: typical (states 1 and 2, mixed).
                    const auto region_log = [&](int region, int64_t a, int64_t b) {
                        if (region == 0) return stretch_log(x, a, b, k, p.states[0], with_gc);
                        const long double u = stretch_log(x, a, b, k, p.states[1], with_gc),
                                          v = stretch_log(x, a, b, k, p.states[2], with_gc);
                        const long double top = std::max(u, v);
                        return top + std::log((std::exp(u - top) + std::exp(v - top)) / 2);
                    };
                    const long double want =
                        region_log(left, from, begin + j) + region_log(right, begin + j, to);
                    worst = std::max(worst,
                                     static_cast<double>(std::abs(got[j] - want) / std::abs(want)));
                    if (got[j] > got[best]) best = j;
                }
                INFO("k " << k << ", G+C term " << with_gc << ", left " << left << ", from "
                          << from);
                CHECK(worst <= 1e-12);
                CHECK(scores.change_point(c, begin, end, left, right, 0, from, to) == best);
            }
        }
}

TEST_CASE("refined ends of signature models: a call's end leaves the grid only on strong evidence",
          "[window][signature][call_ends]") {
    // Two classes of k = 1 whose base frequencies differ (typical A .08 C .33 G .17 T .42,
    // atypical A .18 C .45 G .27 T .09; concentration 1000, near a fixed multinomial), a change
    // from one to the other at a random base and a random grid end `prefer`. The expected split
    // is the rule of ClassBaseScores::change_point applied by brute force to stretch_log
    // (independent, long double) at every split: the best split that does not shorten the call
    // if it beats prefer by more than move_margin, else prefer; a split that shortens the call
    // only if it beats that by more than move_margin. Splits are hundreds of bases from the
    // change or close to it, so the trials hold all three outcomes, among them ends that stay
    // where the plain maximum (the rule before calls were protected) would shorten the call.
    const json doc = signature_profile(1, 100, 1000, 1000);
    const Profile p = parse_profile(doc.dump(), "s.json");
    const ClassBaseScores scores(compile(p));
    const double margin = ClassBaseScores::move_margin;
    test::TestRandom rng(35);
    int stayed = 0, moved_out = 0, moved_in = 0, kept_against_maximum = 0, near_margin = 0;
    for (int trial = 0; trial < 60; ++trial) {
        const int left = static_cast<int>(trial % 2), right = 1 - left;  // atypical: region 0
        const auto call =
            trial % 4 < 2 ? ClassBaseScores::CallSide::left : ClassBaseScores::CallSide::right;
        const int64_t length = 600, begin = 100, end = 500, n = end - begin;
        const int64_t change = begin + static_cast<int64_t>(rng.next() % (n + 1));
        const int64_t prefer = static_cast<int64_t>(rng.next() % (n + 1));
        std::vector<int> x(static_cast<size_t>(length));
        for (int64_t i = 0; i < length; ++i)
            x[static_cast<size_t>(i)] =
                draw_base(rng, p.states[static_cast<size_t>(i < change ? left : right)]);
        std::vector<long double> want(static_cast<size_t>(n + 1));
        for (int64_t j = 0; j <= n; ++j)
            want[static_cast<size_t>(j)] =
                stretch_log(x, 0, begin + j, 1, p.states[static_cast<size_t>(left)], false) +
                stretch_log(x, begin + j, length, 1, p.states[static_cast<size_t>(right)], false);
        const auto best_in = [&](int64_t from, int64_t to) {  // ties: nearest prefer, smaller
            int64_t at = from;
            for (int64_t j = from + 1; j <= to; ++j)
                if (want[static_cast<size_t>(j)] > want[static_cast<size_t>(at)] ||
                    (want[static_cast<size_t>(j)] == want[static_cast<size_t>(at)] &&
                     std::llabs(j - prefer) < std::llabs(at - prefer)))
                    at = j;
            return at;
        };
        bool close = false;
        const auto beats = [&](int64_t a, int64_t b) {
            const long double gain = want[static_cast<size_t>(a)] - want[static_cast<size_t>(b)];
            close = close || std::abs(gain - margin) < 1e-6L;
            return gain > margin;
        };
        const bool call_left = call == ClassBaseScores::CallSide::left;
        int64_t expected = call_left ? best_in(prefer, n) : best_in(0, prefer);
        if (!beats(expected, prefer)) expected = prefer;
        if (call_left ? prefer > 0 : prefer < n) {
            const int64_t shorter = call_left ? best_in(0, prefer - 1) : best_in(prefer + 1, n);
            if (beats(shorter, expected)) expected = shorter;
        }
        if (close) {  // within rounding of the margin: either answer is right
            ++near_margin;
            continue;
        }
        const Contig c = test::contig_from(letters(x));
        INFO("trial " << trial << ", change " << change - begin << ", prefer " << prefer);
        CHECK(scores.change_point(c, begin, end, left, right, prefer, 0, length, call) == expected);
        const int64_t maximum = best_in(0, n);
        const bool shortens = call_left ? maximum < prefer : maximum > prefer;
        if (expected == prefer) ++stayed;
        if (expected != prefer && (call_left ? expected > prefer : expected < prefer)) ++moved_out;
        if (expected != prefer && (call_left ? expected < prefer : expected > prefer)) ++moved_in;
        if (shortens && expected != maximum) ++kept_against_maximum;
    }
    INFO("stayed " << stayed << ", moved out " << moved_out << ", moved in " << moved_in
                   << ", kept against the maximum " << kept_against_maximum << ", near margin "
                   << near_margin);
    CHECK(stayed > 0);
    CHECK(moved_out > 0);
    CHECK(moved_in > 0);
    CHECK(kept_against_maximum > 0);
    CHECK(near_margin < 3);
}

TEST_CASE(
    "refined ends of signature models: a call's grid end stays where the class does not "
    "change",
    "[window][signature][call_ends]") {
    // Windows of 400; the call spans windows 2..5 (800-2400) by its posteriors. Bases follow the
    // atypical class (the call's) over 600-2400 and the typical class elsewhere (the two k = 1
    // classes of the test above): the start's window grid end is 200 bases inside the class
    // change, the end's lies on it. The start moves out to the change (within 40 bases: 200
    // misplaced bases cost about 0.4 nats each, well over the margin); the end has nothing to
    // move for and stays on the grid, however the bases around it happen to fall.
    json doc = signature_profile(1, 400, 1000, 1000);
    doc["calling"] = {{"refine_ends", true}};
    const Profile p = parse_profile(doc.dump(), "s.json");
    const Model m = compile(p);
    for (uint64_t seed = 1; seed <= 5; ++seed) {
        test::TestRandom rng(seed);
        std::string text;
        for (int64_t i = 0; i < 3200; ++i) {
            text += "ACGT"[draw_base(rng, p.states[i >= 600 && i < 2400 ? 0 : 1])];
        }
        const Contig c = test::contig_from(text);
        const Model view = region_view(m);
        IntervalCaller caller(view, CallOptions{});
        WindowExpander bases(m, caller);
        // Region posteriors per window: atypical (region 0, reported), typical (region 1).
        std::vector<double> rows;
        for (double q : {0.0, 0.1, 0.9, 1.0, 1.0, 0.8, 0.0, 0.0}) {
            rows.push_back(q);
            rows.push_back(1 - q);
        }
        BlockView v;
        v.begin = 0;
        v.size = 8;
        v.states = 2;
        v.posterior = rows.data();
        v.window = 400;
        bases.begin_contig(c);
        bases.block(v);
        bases.end_contig(c, DecodeResult{});
        INFO("seed " << seed);
        REQUIRE(caller.calls().size() == 1);
        CHECK(std::llabs(caller.calls()[0].begin - 600) <= 40);
        CHECK(caller.calls()[0].end == 2400);
    }
}

TEST_CASE("signature_distance: delta* of a hand-computed pair", "[window][signature]") {
    // delta* as defined by Karlin & Burge (1995), Trends Genet. 11:283-290, worked by hand.
    // AACC with its reverse complement GGTT: every base 2 of 8 (f* = 1/4); pairs AA, AC, CC, GG,
    // GT, TT once each of 6, so rho* = (1/6) / (1/16) = 8/3 for those, 0 for the others. ACGT is
    // its own reverse complement: pairs AC, CG, GT twice each of 6, rho* = (1/3) / (1/16) = 16/3.
    // |differences|: AA, CC, GG, TT 8/3 each; AC, GT |8/3 - 16/3| = 8/3 each; CG 16/3; the rest 0.
    // delta* = (6 x 8/3 + 16/3) / 16 = 4/3.
    const Contig a = test::contig_from("AACC"), b = test::contig_from("ACGT");
    const DinucleotideCounts ca = dinucleotide_counts(a, 0, 4), cb = dinucleotide_counts(b, 0, 4);
    CHECK(signature_distance(ca, cb) == Approx(4.0 / 3).epsilon(1e-15));
    CHECK(signature_distance(cb, ca) == Approx(4.0 / 3).epsilon(1e-15));
    CHECK(signature_distance(ca, ca) == 0);
    // A pair needs two adjacent known bases; a stretch without pairs, or without A and T, has no
    // rho*: NaN.
    const Contig gapped = test::contig_from("ACNGT");
    const DinucleotideCounts cg = dinucleotide_counts(gapped, 0, 5);
    CHECK(cg.pairs[0 * 4 + 1] == 1);  // AC
    CHECK(cg.pairs[2 * 4 + 3] == 1);  // GT
    CHECK(cg.pairs[1 * 4 + 2] == 0);  // no CG across the unknown base
    CHECK(std::isnan(signature_distance(dinucleotide_counts(gapped, 1, 3), ca)));  // "CN"
    CHECK(std::isnan(signature_distance(dinucleotide_counts(test::contig_from("CCGG"), 0, 4), ca)));
}
