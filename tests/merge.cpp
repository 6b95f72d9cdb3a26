// Merge's pieces on their own (src/merge_internal.hpp): a record split into segments is restored
// and joined exactly as one process joins the same segments, with calls at the places and with
// the compositions that a sequential pass and a direct count of the bases give; shard files are
// streamed back in input order; summaries of other runs, missing shards and edited segments are
// refused.
#include <algorithm>
#include <catch2/catch.hpp>
#include <fstream>
#include <random>
#include <sstream>

#include "merge_internal.hpp"
#include "test_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/shard.hpp"

using namespace tidemark;
using namespace tidemark::merging;
using test::TempFile;

namespace {

// Composition of s[begin, end) counted directly from the text (independent of the library):
// bases by letter, N as unknown, CpG = C at i and G at i + 1 with both inside.
Composition count_bases(const std::string& s, int64_t begin, int64_t end) {
    Composition c;
    for (int64_t i = begin; i < end; ++i) {
        switch (s[static_cast<size_t>(i)]) {
            case 'A':
                ++c.a;
                break;
            case 'C':
                ++c.c;
                break;
            case 'G':
                ++c.g;
                break;
            case 'T':
                ++c.t;
                break;
            default:
                ++c.unknown;
        }
        if (i + 1 < end && s[static_cast<size_t>(i)] == 'C' && s[static_cast<size_t>(i) + 1] == 'G')
            ++c.cpg;
    }
    return c;
}

void require_same(const Composition& a, const Composition& b) {
    REQUIRE(a.a == b.a);
    REQUIRE(a.c == b.c);
    REQUIRE(a.g == b.g);
    REQUIRE(a.t == b.t);
    REQUIRE(a.unknown == b.unknown);
    REQUIRE(a.cpg == b.cpg);
}

// A record with GC-rich stretches (some across the segment boundaries) and an N run across one.
std::string test_bases(size_t length, int64_t segment) {
    std::mt19937_64 rng(13);
    std::string s(length, 'A');
    const auto draw = [&](size_t from, size_t to, double gc) {
        std::uniform_real_distribution<double> u(0, 1);
        for (size_t i = from; i < to && i < length; ++i) {
            const bool strong = u(rng) < gc;
            s[i] = strong ? (u(rng) < 0.5 ? 'C' : 'G') : (u(rng) < 0.5 ? 'A' : 'T');
        }
    };
    draw(0, length, 0.38);
    for (size_t c = static_cast<size_t>(segment); c < length; c += static_cast<size_t>(segment))
        draw(c - 300, c + 250, 0.75);
    draw(150, 700, 0.72);
    std::fill(s.begin() + 2 * segment - 20, s.begin() + 2 * segment + 20, 'N');
    return s;
}

// Posterior of the reported region at t: high over the GC-rich stretches, with a short dip
// (shorter than the merge gap) right after the first boundary so that runs merge across it.
double island_posterior(int64_t t, int64_t segment, int64_t length) {
    for (int64_t c = segment; c < length; c += segment) {
        if (t >= c + 5 && t < c + 25) return 0.2;  // a short gap across the seam
        if (t >= c - 300 && t < c + 250) return 0.9 - 0.001 * static_cast<double>((t * 7) % 50);
    }
    if (t >= 150 && t < 700) return 0.97;
    return 0.01 + 0.0001 * static_cast<double>(t % 37);
}

// Feeds [begin, end) of the contig to a sink in blocks, with per-state posteriors that put the
// island posterior on one state of the reported region and the rest on one other state.
void feed(DecodeSink& sink, const Contig& contig, const std::string& bases, const Model& model,
          int64_t begin, int64_t end, int64_t segment) {
    int in = -1, out = -1;
    for (int s = 0; s < model.states; ++s) {
        const bool reported =
            model.region_report[static_cast<size_t>(model.region_of_state[static_cast<size_t>(s)])];
        if (reported && in < 0) in = s;
        if (!reported && out < 0) out = s;
    }
    REQUIRE(in >= 0);
    REQUIRE(out >= 0);
    const int64_t block = 128;
    std::vector<double> post;
    std::vector<uint8_t> codes;
    for (int64_t b = begin; b < end; b += block) {
        const int64_t n = std::min(block, end - b);
        post.assign(static_cast<size_t>(n * model.states), 0.0);
        codes.assign(static_cast<size_t>(n), 0);
        contig.unpack(b, n, codes.data());
        for (int64_t t = 0; t < n; ++t) {
            const double p = island_posterior(b + t, segment, contig.length);
            post[static_cast<size_t>(t * model.states + in)] = p;
            post[static_cast<size_t>(t * model.states + out)] = 1 - p;
        }
        BlockView v;
        v.begin = b;
        v.size = n;
        v.states = model.states;
        v.bases = codes.data();
        v.posterior = post.data();
        sink.block(v);
    }
    (void)bases;
}

}  // namespace

TEST_CASE("merge restores a record split into segments exactly as one process joins them") {
    const Model model = compile(load_profile("cpg-island"));
    CallOptions calling;
    calling.min_posterior = 0.5;
    calling.merge_gap = 50;
    calling.min_length = 200;
    const int64_t segment = 1000;
    const std::string bases = test_bases(3 * segment + 400, segment);
    Contig contig = test::contig_from(bases, "chrS");
    contig.offset = 5000;  // a region of a longer sequence
    contig.sequence_length = 20000;
    const int64_t length = contig.length;
    const size_t segments = 4;
    const auto seg_end = [&](size_t k) {
        return std::min<int64_t>(length, static_cast<int64_t>(k + 1) * segment);
    };
    DecodeResult result;
    result.log_likelihood = -1234.5;

    // One process: the segments' forks joined in order (what scan does for a long contig).
    IntervalCaller joined(model, calling);
    RegionTotals joined_totals(model);
    joined.begin_contig(contig);
    joined_totals.begin_contig(contig);
    // And what shards write for the same segments (describe_segment), the shard of each segment.
    std::vector<SplitSegment> described;
    for (size_t k = 0; k < segments; ++k) {
        auto caller = joined.fork();
        auto totals = joined_totals.fork();
        caller->begin_contig(contig);
        totals->begin_contig(contig);
        const int64_t b = static_cast<int64_t>(k) * segment;
        feed(*caller, contig, bases, model, b, seg_end(k), segment);
        feed(*totals, contig, bases, model, b, seg_end(k), segment);
        described.push_back(describe_segment(contig, k, b, seg_end(k),
                                             dynamic_cast<IntervalCaller&>(*caller),
                                             dynamic_cast<RegionTotals&>(*totals)));
        joined.join(*caller);
        joined_totals.join(*totals);
    }
    joined.end_contig(contig, result);
    joined_totals.end_contig(contig, result);

    // A sequential pass over the whole record, without any fork.
    IntervalCaller sequential(model, calling);
    sequential.begin_contig(contig);
    feed(sequential, contig, bases, model, 0, length, segment);
    sequential.end_contig(contig, result);

    // Merge's side: two shard documents, segments 0 and 2-3 from one, 1 from the other.
    std::vector<ShardDoc> docs(2);
    docs[0].path = "shard1.json";
    docs[1].path = "shard2.json";
    SplitAssembly a;
    a.record.whole.name = contig.name;
    a.record.whole.offset = contig.offset;
    a.record.whole.length = length;
    a.record.whole.log_likelihood = result.log_likelihood;
    a.record.full_length = contig.full_length();
    a.record.segments = segments;
    for (size_t k = 0; k < segments; ++k) a.segments.emplace_back(k == 1 ? 1 : 0, &described[k]);
    const SplitContext context{model, calling, BedStyle::plain};
    check_segments(docs, a, model);
    join_segments(a, context);

    const std::vector<Call>& want = joined.calls();
    REQUIRE(want.size() >= 3);
    bool crosses = false;  // the test is only worth something when a call crosses a seam
    for (const Call& c : want)
        for (int64_t b = segment; b < length; b += segment)
            crosses = crosses || (c.begin < b && b < c.end);
    REQUIRE(crosses);
    REQUIRE(a.calls.size() == want.size());
    REQUIRE(sequential.calls().size() == want.size());
    for (size_t i = 0; i < want.size(); ++i) {
        const Call &got = a.calls[i], &one = want[i], &seq = sequential.calls()[i];
        REQUIRE(got.begin == one.begin);
        REQUIRE(got.end == one.end);
        REQUIRE(got.region == one.region);
        REQUIRE(got.core_begin == one.core_begin);
        REQUIRE(got.core_end == one.core_end);
        // Bit for bit: sums are added in the order of the one-process join.
        REQUIRE(got.mean_posterior == one.mean_posterior);
        REQUIRE(got.min_posterior == one.min_posterior);
        REQUIRE(got.confident_bases == one.confident_bases);
        // Places as in a sequential pass; means within rounding of it (another summation order).
        REQUIRE(got.begin == seq.begin);
        REQUIRE(got.end == seq.end);
        REQUIRE(got.mean_posterior == Approx(seq.mean_posterior).epsilon(1e-12));
        // Composition from the prefix compositions equals a direct count of the call's bases.
        require_same(got.composition, count_bases(bases, got.begin, got.end));
    }
    REQUIRE(a.summary.expected_bases == joined_totals.expected_bases());
    require_same(a.summary.composition, count_bases(bases, 0, length));
    REQUIRE(a.summary.unknown == 40);
    REQUIRE(a.summary.log_likelihood == result.log_likelihood);
    REQUIRE(a.contig.name == "chrS");
    REQUIRE(a.contig.offset == 5000);
    REQUIRE(a.contig.full_length() == 20000);
}

TEST_CASE("prefix compositions give the composition of any span between their positions") {
    const int64_t segment = 700;
    const std::string bases = test_bases(3 * segment, segment);
    const Contig contig = test::contig_from(bases);
    const Model model = compile(load_profile("cpg-island"));
    // Segments with prefix compositions at their bounds and at a few inner positions (the
    // positions a caller's groups would put there).
    std::vector<SplitSegment> segs;
    IntervalCaller caller(model, CallOptions{});
    RegionTotals totals(model);
    for (size_t k = 0; k < 3; ++k)
        segs.push_back(describe_segment(contig, k, static_cast<int64_t>(k) * segment,
                                        static_cast<int64_t>(k + 1) * segment, caller, totals));
    SplitAssembly a;
    for (size_t k = 0; k < 3; ++k) a.segments.emplace_back(0, &segs[k]);
    const PrefixCompositions compositions(a);
    const std::vector<int64_t> at = {0, segment, 2 * segment, 3 * segment};
    for (int64_t b : at)
        for (int64_t e : at)
            if (b < e) require_same(compositions(b, e), count_bases(bases, b, e));
    // A span whose end has no prefix composition: the file was edited.
    REQUIRE_THROWS_AS(compositions(0, 5), InputError);
}

TEST_CASE("merge refuses segments that do not tile the record") {
    const Model model = compile(load_profile("cpg-island"));
    const Contig contig = test::contig_from(std::string(2000, 'A'), "chrE");
    IntervalCaller caller(model, CallOptions{});
    RegionTotals totals(model);
    caller.begin_contig(contig);
    std::vector<SplitSegment> segs = {describe_segment(contig, 0, 0, 1000, caller, totals),
                                      describe_segment(contig, 1, 1000, 2000, caller, totals)};
    std::vector<ShardDoc> docs(1);
    docs[0].path = "edited.json";
    SplitAssembly a;
    a.record.whole.name = "chrE";
    a.record.whole.length = 2000;
    a.record.segments = 2;
    a.segments = {{0, &segs[0]}, {0, &segs[1]}};
    REQUIRE_NOTHROW(check_segments(docs, a, model));
    segs[1].begin = 1100;  // a gap between the segments
    REQUIRE_THROWS_WITH(check_segments(docs, a, model),
                        Catch::Contains("does not continue the segment before it"));
    segs[1].begin = 1000;
    segs[1].calls.push_back(Call{1500, 2500, 0});  // a call past the segment's end
    REQUIRE_THROWS_WITH(check_segments(docs, a, model), Catch::Contains("call outside it"));
    segs[1].calls.clear();
    segs[1].prefixes.pop_back();  // the prefix composition at its end removed
    REQUIRE_THROWS_WITH(check_segments(docs, a, model),
                        Catch::Contains("lacks its composition marks"));
}

namespace {

// A minimal shard summary: what read_doc and run_identity read.
std::string summary_text(int index, int count, const std::string& profile,
                         const std::string& contigs = "[]") {
    return "{\"format\":\"tidemark-summary/1\",\"tool_version\":\"x\",\"command\":\"tidemark scan "
           "g.fa\","
           "\"inputs\":[\"g.fa\"],\"profile\":\"" +
           profile +
           "\",\"decode\":\"posterior\",\"genome\":{\"regions\":{\"island\":{\"reported\":true}}},"
           "\"shard\":{\"index\":" +
           std::to_string(index) + ",\"count\":" + std::to_string(count) +
           ",\"records\":3,\"options\":{},\"contigs\":" + contigs + "}}";
}

std::string read_text(const std::string& path) {
    std::ifstream in(path);
    std::stringstream s;
    s << in.rdbuf();
    return s.str();
}

ContigSummary record(const std::string& name, int64_t input_index, int64_t length) {
    ContigSummary c;
    c.name = name;
    c.input_index = input_index;
    c.length = length;
    return c;
}

}  // namespace

TEST_CASE("merge refuses summaries of other runs, missing shards and repeated shards") {
    TempFile one(summary_text(1, 2, "cpg-island"), ".json"),
        two(summary_text(2, 2, "cpg-island"), ".json");
    TempFile other(summary_text(2, 2, "isochore"), ".json"),
        lone(summary_text(1, 3, "cpg-island"), ".json");
    TempFile report(summary_text(1, 2, "cpg-island"), ".json");
    REQUIRE(read_docs({one.path(), two.path()}, "tidemark-summary/1").size() == 2);
    REQUIRE_THROWS_WITH(read_docs({one.path(), other.path()}, "tidemark-summary/1"),
                        Catch::Contains("come from different runs"));
    REQUIRE_THROWS_WITH(read_docs({lone.path()}, "tidemark-summary/1"),
                        Catch::Contains("missing shards: 2, 3"));
    REQUIRE_THROWS_WITH(read_docs({report.path()}, "tidemark-report/1"),
                        Catch::Contains("not a tidemark-report/1"));
    TempFile bad(summary_text(3, 2, "cpg-island"), ".json");
    REQUIRE_THROWS_WITH(read_doc(bad.path(), "tidemark-summary/1"),
                        Catch::Contains("is not a valid shard"));
    // The same shard twice (as many files as shards, so the count check passes).
    const std::vector<ShardDoc> twice = read_docs({one.path(), one.path()}, "tidemark-summary/1");
    REQUIRE_THROWS_WITH(assemble(twice, ""), Catch::Contains("given twice"));
}

TEST_CASE("merge streams the shards' lines back in input order") {
    // Records in input order: chrA (shard 1), chrB (shard 2), chrC (shard 1).
    std::vector<ShardDoc> docs(2);
    docs[0].path = "s1.json";
    docs[0].index = 1;
    docs[1].path = "s2.json";
    docs[1].index = 2;
    for (auto& d : docs) {
        d.count = 2;
        d.records = 3;
    }
    docs[0].contigs = {record("chrA", 0, 1000), record("chrC", 2, 1000)};
    docs[1].contigs = {record("chrB", 1, 1000)};
    const MergedRun run = assemble(docs, "");
    REQUIRE(run.slots.size() == 3);
    REQUIRE(run.contigs[1].name == "chrB");

    TempFile bed1("#command: one\nchrA\t10\t20\ta\nchrA\t30\t40\tb\nchrC\t5\t9\tc\n", ".bed");
    TempFile bed2("#command: two\nchrB\t0\t100\td\n", ".bed");
    const std::string target = bed1.dir() + "/merged.bed";
    auto out = merge_text(docs, run, {bed1.path(), bed2.path()}, target, OutputFormat{}, nullptr);
    out->commit();
    // Shard 1's header, then the lines record by record in input order.
    REQUIRE(read_text(target) ==
            "#command: one\nchrA\t10\t20\ta\nchrA\t30\t40\tb\nchrB\t0\t100\td\nchrC\t5\t9\tc\n");

    // Lines out of order (chrC before chrA) belong to no record where they stand.
    TempFile swapped("chrC\t5\t9\tc\nchrA\t10\t20\ta\n", ".bed");
    TempFile plain2("chrB\t0\t100\td\n", ".bed");
    REQUIRE_THROWS_WITH(merge_text(docs, run, {swapped.path(), plain2.path()},
                                   bed1.dir() + "/x.bed", OutputFormat{}, nullptr),
                        Catch::Contains("belongs to no record"));
    // Files given in another order than the summaries.
    REQUIRE_THROWS_AS(merge_text(docs, run, {bed2.path(), bed1.path()}, bed1.dir() + "/y.bed",
                                 OutputFormat{}, nullptr),
                      InputError);
}

TEST_CASE("merge joins equal track runs where the pieces of a split record meet") {
    // One split record of 3 segments: segments 0-1 from shard 1, segment 2 from shard 2. Each
    // piece ends its last run at the piece's end; runs of equal value across 2000 are joined.
    const Model model = compile(load_profile("cpg-island"));
    std::vector<ShardDoc> docs(2);
    for (int k = 0; k < 2; ++k) {
        docs[static_cast<size_t>(k)].path = "s" + std::to_string(k + 1) + ".json";
        docs[static_cast<size_t>(k)].index = k + 1;
        docs[static_cast<size_t>(k)].count = 2;
        docs[static_cast<size_t>(k)].records = 1;
        // What merge reads to call split records: the recorded options and profile checksum.
        docs[static_cast<size_t>(k)].doc = ordered_json::parse(
            "{\"shard\":{\"options\":{\"profile\":\"cpg-island\",\"min_posterior\":0.5,\"merge_"
            "gap\":50,"
            "\"min_length\":200,\"core_posterior\":0.95,\"island_criteria\":\"none\",\"bed_style\":"
            "\"plain\"},"
            "\"profile_crc32\":\"" +
            profile_checksum(load_profile("cpg-island")) + "\"}}");
    }
    const Contig contig = test::contig_from(std::string(3000, 'C'), "chrT");
    IntervalCaller caller(model, CallOptions{});
    RegionTotals totals(model);
    caller.begin_contig(contig);
    for (int k = 0; k < 2; ++k) {
        SplitRecord r;
        r.whole = record("chrT", 0, 3000);
        r.segments = 3;
        for (size_t s = (k == 0 ? 0 : 2); s < (k == 0 ? 2u : 3u); ++s)
            r.done.push_back(describe_segment(contig, s, static_cast<int64_t>(s) * 1000,
                                              static_cast<int64_t>(s + 1) * 1000, caller, totals));
        docs[static_cast<size_t>(k)].split.push_back(r);
    }
    const MergedRun run = assemble(docs, "cpg-island");
    REQUIRE(run.split.size() == 1);
    TempFile t1("chrT\t0\t1500\t0.100\nchrT\t1500\t2000\t0.900\n", ".bedgraph");
    TempFile t2("chrT\t2000\t2600\t0.900\nchrT\t2600\t3000\t0.100\n", ".bedgraph");
    const std::string target = t1.dir() + "/merged.bedgraph";
    merge_text(docs, run, {t1.path(), t2.path()}, target, OutputFormat{}, nullptr)->commit();
    REQUIRE(read_text(target) ==
            "chrT\t0\t1500\t0.100\nchrT\t1500\t2600\t0.900\nchrT\t2600\t3000\t0.100\n");
}
