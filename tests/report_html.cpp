// The HTML report's posterior sketch against the per-base posteriors it summarises (bin means
// over known bases recomputed here from every row, GC counted from the bases), decoded whole and
// in parallel segments; which sequences, calls and example windows (distinct loci) it keeps;
// escaping against the HTML standard's character references.
#include "tidemark/report_html.hpp"

#include <catch2/catch.hpp>
#include <random>

#include "report_html_internal.hpp"
#include "test_util.hpp"
#include "thread_pool.hpp"
#include "tidemark/decode.hpp"

using namespace tidemark;

namespace {

// P(region 0) at every position, forkable like the report's sink.
struct RegionRows : DecodeSink {
    const Model* model = nullptr;
    std::vector<double> p;
    void block(const BlockView& v) override {
        for (int64_t t = 0; t < v.size; ++t) {
            double sum = 0;
            for (int s = 0; s < v.states; ++s)
                if (model->region_of_state[static_cast<size_t>(s)] == 0)
                    sum += v.posterior[t * v.states + s];
            p.push_back(sum);
        }
    }
    std::unique_ptr<DecodeSink> fork() const override {
        auto f = std::make_unique<RegionRows>();
        f->model = model;
        return f;
    }
    void join(DecodeSink& later) override {
        auto& o = dynamic_cast<RegionRows&>(later);
        p.insert(p.end(), o.p.begin(), o.p.end());
    }
};

std::string random_bases(std::mt19937_64& rng, int64_t n) {
    std::string bases;
    std::uniform_int_distribution<int> pick(0, 99);
    for (int64_t i = 0; i < n; ++i) {
        const int x = pick(rng);
        // CpG-rich stretches every few thousand bases, so that the posterior moves.
        const bool rich = (i / 1500) % 4 == 1;
        bases += x < 2 ? 'N' : rich ? "CGCGATGC"[x % 8] : "ACGTAATT"[x % 8];
    }
    return bases;
}

Contig random_contig(std::mt19937_64& rng, int64_t n, const std::string& name) {
    return test::contig_from(random_bases(rng, n), name);
}

// Mean of P over the known bases of [lo, hi) of `contig_bases`; NaN when none is known.
const Contig* known_contig = nullptr;
double known_mean(const std::vector<double>& p, int64_t lo, int64_t hi) {
    double sum = 0;
    int64_t n = 0;
    for (int64_t i = lo; i < hi; ++i)
        if (known_contig->base(i) != 4) {
            sum += p[static_cast<size_t>(i)];
            ++n;
        }
    return n ? sum / static_cast<double>(n) : std::nan("");
}

Call make_call(int64_t begin, int64_t end, double mean) {
    Call c;
    c.begin = begin;
    c.end = end;
    c.mean_posterior = mean;
    c.min_posterior = mean;
    return c;
}

}  // namespace

TEST_CASE("html_escape replaces the five characters markup needs", "[report_html]") {
    // HTML Living Standard, named and numeric character references.
    CHECK(html_escape("<script>alert(1)</script>") == "&lt;script&gt;alert(1)&lt;/script&gt;");
    CHECK(html_escape("a&b \"c\" 'd'") == "a&amp;b &quot;c&quot; &#39;d&#39;");
    CHECK(html_escape("chr1\xc3\xa9") == "chr1\xc3\xa9");  // UTF-8 passes unchanged
}

TEST_CASE("the sketch's bins are the means of the per-base posteriors, whole or in segments",
          "[report_html]") {
    const Model model = compile(load_profile("cpg-island"));
    std::mt19937_64 rng(11);
    const Contig contig = random_contig(rng, 30011, "c1");
    known_contig = &contig;
    HtmlReportOptions options;
    options.sketch_values = 4000;  // bins of ceil(30011 / 4000) = 8 bases
    options.overview_bins = 500;   // 61 bases rounded up to whole sketch bins: 64
    options.window_points = 50;

    // Reference: every row, sequential decoding.
    RegionRows rows;
    rows.model = &model;
    PosteriorDecoder whole(model, DecoderOptions{1024, -1, 1});
    whole.run(contig, rows);

    for (const bool segmented : {false, true}) {
        DYNAMIC_SECTION((segmented ? "segments of 4096 bases on 2 threads" : "one sweep")) {
            HtmlReport report(model, options);
            auto fork = report.fork();
            PosteriorDecoder decoder(model, DecoderOptions{1024, segmented ? 4096 : -1, 1});
            TaskPool pool(2);
            REQUIRE(decoder.splits(contig.length) == segmented);
            decoder.run(contig, *fork, segmented ? &pool : nullptr);
            report.join(*fork);
            const std::vector<Call> calls = {make_call(1500, 3000, 0.9),
                                             make_call(7500, 9000, 0.95)};
            report.finish_sequence(contig, calls);

            REQUIRE(report.shown().size() == 1);
            const SequenceSketch& s = report.shown()[0];
            CHECK(s.bin == 64);
            REQUIRE(s.posterior.size() == static_cast<size_t>((contig.length + 63) / 64));
            // Means over the bin's known bases: the posterior inside a gap is left out.
            double worst = 0;
            for (size_t b = 0; b < s.posterior.size(); ++b) {
                const int64_t lo = static_cast<int64_t>(b) * 64,
                              hi = std::min(lo + 64, contig.length);
                worst = std::max(worst, std::abs(known_mean(rows.p, lo, hi) - s.posterior[b]));
            }
            CHECK(worst < 1e-5);  // float storage
            // Calls mark the bins they touch: 1500..2999 -> bins 23..46.
            CHECK(s.called[22] == 0);
            CHECK(s.called[23] == 1);
            CHECK(s.called[46] == 1);
            CHECK(s.called[47] == 0);
            // Unknown fraction per bin, counted here from the bases.
            for (size_t b = 0; b < s.unknown.size(); b += 37) {
                const int64_t lo = static_cast<int64_t>(b) * 64,
                              hi = std::min(lo + 64, contig.length);
                int64_t n = 0;
                for (int64_t i = lo; i < hi; ++i) n += contig.base(i) == 4;
                CHECK(s.unknown[b] ==
                      Approx(static_cast<double>(n) / static_cast<double>(hi - lo)));
            }
            // The most confident call's window: at least 1 kb each side, points of whole bins.
            REQUIRE(report.top_windows().size() == 2);
            const CallWindow& w = report.top_windows()[0];
            CHECK(w.call.begin == 7500);
            CHECK(w.begin <= 6500);
            CHECK(w.end >= 10000);
            CHECK(w.bin % 8 == 0);
            REQUIRE(w.gc.size() == w.posterior.size());
            for (size_t i = 0; i < w.posterior.size(); ++i) {
                const int64_t lo = w.begin + static_cast<int64_t>(i) * w.bin;
                const int64_t hi = std::min(lo + w.bin, w.end);
                CHECK(w.posterior[i] == Approx(known_mean(rows.p, lo, hi)).margin(1e-5));
            }
            // GC: runs of points with one value are steps of at least 200 bases (the last may
            // be shorter when the window is) whose GC, counted here from the bases, is that value.
            for (size_t i = 0; i < w.gc.size();) {
                size_t j = i;
                while (j < w.gc.size() && w.gc[j] == w.gc[i]) ++j;
                const int64_t lo = w.begin + static_cast<int64_t>(i) * w.bin;
                const int64_t hi = std::min(w.begin + static_cast<int64_t>(j) * w.bin, w.end);
                CHECK(hi - lo >= 200);
                int64_t gc = 0, known = 0;
                for (int64_t p = lo; p < hi; ++p) {
                    const uint8_t base = contig.base(p);
                    known += base != 4;
                    gc += base == 1 || base == 2;
                }
                CHECK(w.gc[i] == Approx(static_cast<double>(gc) / static_cast<double>(known)));
                i = j;
            }
        }
    }
}

TEST_CASE("the report keeps the longest sequences and the most confident calls", "[report_html]") {
    const Model model = compile(load_profile("cpg-island"));
    std::mt19937_64 rng(5);
    HtmlReportOptions options;
    options.shown_sequences = 2;
    options.top_calls = 3;
    HtmlReport report(model, options);
    const std::vector<int64_t> lengths = {3000, 5000, 4000, 5000};
    // Calls: (sequence, begin, end, mean posterior).
    const std::vector<std::vector<Call>> calls = {
        {make_call(100, 400, 0.99), make_call(1000, 1300, 0.97)},
        {make_call(200, 400, 0.99)},  // same confidence as the first, shorter
        {make_call(100, 900, 0.98)},
        {make_call(100, 400, 0.99)},  // ties the first one exactly: the earlier sequence wins
    };
    PosteriorDecoder decoder(model);
    for (size_t i = 0; i < lengths.size(); ++i) {
        const Contig contig = random_contig(rng, lengths[i], "s" + std::to_string(i + 1));
        auto fork = report.fork();
        decoder.run(contig, *fork);
        report.join(*fork);
        report.finish_sequence(contig, calls[i]);
    }
    CHECK(report.sequences_seen() == 4);
    // The two longest (5000 and 5000; the 4000 one is pushed out by the last), in input order.
    REQUIRE(report.shown().size() == 2);
    CHECK(report.shown()[0].name == "s2");
    CHECK(report.shown()[1].name == "s4");
    // 0.99 x 300 bp (s1 before s4), then 0.99 x 200 bp.
    REQUIRE(report.top_windows().size() == 3);
    CHECK(report.top_windows()[0].name == "s1");
    CHECK(report.top_windows()[1].name == "s4");
    CHECK(report.top_windows()[2].name == "s2");
}

TEST_CASE("example windows come from distinct loci; the tables list calls in position order",
          "[report_html]") {
    const Model model = compile(load_profile("cpg-island"));
    std::mt19937_64 rng(7);
    HtmlReportOptions options;
    options.top_calls = 3;
    options.listed_calls = 3;
    options.ranked_calls = 2;
    HtmlReport report(model, options);
    const Contig long_one = random_contig(rng, 20000, "long");
    const Contig short_one = random_contig(rng, 900, "short");
    // On "long": the second call's window (it and 1 kb either side) overlaps the first's, so it
    // is no example although it beats the third; on "short" one call spans the sequence: most
    // confident of all, but shown last (no border to see).
    const std::vector<Call> long_calls = {make_call(1000, 1300, 0.99), make_call(1500, 1800, 0.98),
                                          make_call(10000, 12000, 0.97)};
    const std::vector<Call> short_calls = {make_call(0, 900, 1.0)};
    PosteriorDecoder decoder(model);
    for (const auto* item : {&long_one, &short_one}) {
        auto fork = report.fork();
        decoder.run(*item, *fork);
        report.join(*fork);
        report.finish_sequence(*item, item == &long_one ? long_calls : short_calls);
    }
    REQUIRE(report.top_windows().size() == 3);
    CHECK(report.top_windows()[0].call.begin == 1000);
    CHECK(report.top_windows()[1].call.begin == 10000);
    CHECK(report.top_windows()[2].name == "short");
    // The first three calls in position order, the count of all four.
    CHECK(report.calls_seen() == 4);
    REQUIRE(report.listed_calls().size() == 3);
    CHECK(report.listed_calls()[0].call.begin == 1000);
    CHECK(report.listed_calls()[2].call.begin == 10000);
    REQUIRE(report.most_confident().size() == 2);
    CHECK(report.most_confident()[0].name == "short");
    CHECK(report.most_confident()[1].call.begin == 1000);
    REQUIRE(report.longest().size() == 2);
    CHECK(report.longest()[0].call.begin == 10000);
    CHECK(report.longest()[1].name == "short");
}

TEST_CASE("a sequence that starts in a gap, or is all gap, leaves its unknown bins empty",
          "[report_html]") {
    const Model model = compile(load_profile("cpg-island"));
    std::mt19937_64 rng(3);
    HtmlReportOptions options;
    options.sketch_values = 1000;  // bins of 5 bases for 5000 bases
    options.overview_bins = 100;   // 50 bases
    HtmlReport report(model, options);
    const Contig starts_in_gap =
        test::contig_from(std::string(1000, 'N') + random_bases(rng, 4000), "gap_first");
    const Contig all_gap = test::contig_from(std::string(700, 'N'), "all_gap");
    PosteriorDecoder decoder(model, DecoderOptions{256, 1024, 1});
    TaskPool pool(2);
    for (const Contig* c : {&starts_in_gap, &all_gap}) {
        auto fork = report.fork();
        decoder.run(*c, *fork, &pool);  // segments of 1,024 bases: the first ones all gap
        report.join(*fork);
        REQUIRE_NOTHROW(report.finish_sequence(*c, {}));
    }
    REQUIRE(report.shown().size() == 2);
    const SequenceSketch& s = report.shown()[0];
    REQUIRE(s.name == "gap_first");
    CHECK(s.bin == 50);
    for (size_t b = 0; b < 20; ++b) {  // bases 0..999: unknown
        CHECK(std::isnan(s.posterior[b]));
        CHECK(s.unknown[b] == 1.0f);
    }
    for (size_t b = 20; b < s.posterior.size(); ++b) CHECK(std::isfinite(s.posterior[b]));
    for (const float p : report.shown()[1].posterior) CHECK(std::isnan(p));
}

TEST_CASE("long names are shortened in the middle, at UTF-8 character boundaries",
          "[report_html]") {
    using report_detail::shortened;
    const std::string draft = "NODE_605_length_701_cov_12.345678_ID_1209";
    const std::string cut = shortened(draft, 30);
    CHECK(cut == "NODE_605_lengt\u2026.345678_ID_1209");  // 14 + ellipsis + 15 characters
    CHECK(shortened("chr1", 30) == "chr1");
    // A two-byte character (U+00E9) at the cut is kept whole or dropped, never split.
    const std::string accented = "\u00e9\u00e9\u00e9\u00e9\u00e9\u00e9\u00e9\u00e9\u00e9\u00e9";
    const std::string a = shortened(accented, 9);
    CHECK(a == "\u00e9\u00e9\u2026\u00e9\u00e9");
}

TEST_CASE("the page lists calls up to its limit, says how many more, and names the BED",
          "[report_html]") {
    const Profile profile = load_profile("cpg-island");
    const Model model = compile(profile);
    std::mt19937_64 rng(9);
    HtmlReportOptions options;
    options.listed_calls = 3;
    HtmlReport report(model, options);
    const Contig contig = random_contig(rng, 12000, "c<1>");
    auto fork = report.fork();
    PosteriorDecoder(model).run(contig, *fork);
    report.join(*fork);
    std::vector<Call> calls;
    for (int64_t b = 1000; b < 11000; b += 2000) calls.push_back(make_call(b, b + 500, 0.9));
    report.finish_sequence(contig, calls);
    ContigSummary summary;
    summary.name = contig.name;
    summary.length = contig.length;
    summary.reset_calls(model.region_names.size());
    for (const Call& c : calls) summary.add_call(c, model.region_names.size());
    const std::vector<ContigSummary> contigs = {summary};
    RunInfo info;
    info.inputs = {"in.fa"};
    info.decode_mode = "posterior";
    const CallOptions calling;
    const std::vector<std::string> warnings = {"a <warning> & more"};
    const std::string page = format_html_report(
        {&info, &profile, &model, &calling, &contigs, &report, &warnings, 1, "calls&.bed"});
    // Calls 1,001..1,500 and so on, 1-based: the first three listed, the last two not.
    CHECK(page.find("The first 3 of 5 calls in position order") != std::string::npos);
    CHECK(page.find("<b>2 more calls are not listed here</b>; all 5 are in "
                    "<code>calls&amp;.bed</code>") != std::string::npos);
    CHECK(page.find("<td>5,001</td>") != std::string::npos);
    // The warning box comes first and holds the warning as text.
    const size_t box = page.find("<section class=\"warn\" id=\"warnings\">");
    CHECK(box != std::string::npos);
    CHECK(box < page.find("<section id=\"run\">"));
    CHECK(page.find("<li>a &lt;warning&gt; &amp; more</li>") != std::string::npos);
    CHECK(page.find("c<1>") == std::string::npos);
}
