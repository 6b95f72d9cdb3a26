// Parallel decoding: segmented decoding of long contigs against exhaustive enumeration and
// against the sequential engine, sinks split at every position against one sequential pass
// (whose values the hand-computed tests in call.cpp fix), and thread-count independence.
#include <algorithm>
#include <catch2/catch.hpp>
#include <cmath>
#include <fstream>
#include <random>
#include <sstream>

#include "test_util.hpp"
#include "thread_pool.hpp"
#include "tidemark/call.hpp"
#include "tidemark/decode.hpp"
#include "tidemark/error.hpp"
#include "tidemark/summary.hpp"
#include "tidemark/track.hpp"
#include "tidemark/train.hpp"
#include "train_enumerate.hpp"

using namespace tidemark;

namespace {

// Every posterior row and block start, forkable: a fork collects a later span, join appends.
struct Rows : DecodeSink {
    std::vector<double> posterior;
    std::vector<int64_t> starts;
    void block(const BlockView& v) override {
        starts.push_back(v.begin);
        posterior.insert(posterior.end(), v.posterior, v.posterior + v.size * v.states);
    }
    std::unique_ptr<DecodeSink> fork() const override { return std::make_unique<Rows>(); }
    void join(DecodeSink& later) override {
        auto& o = dynamic_cast<Rows&>(later);
        posterior.insert(posterior.end(), o.posterior.begin(), o.posterior.end());
        starts.insert(starts.end(), o.starts.begin(), o.starts.end());
    }
};

// The same without fork(): the decoder must fall back to one sequential pass.
struct PlainRows : DecodeSink {
    std::vector<double> posterior;
    void block(const BlockView& v) override {
        posterior.insert(posterior.end(), v.posterior, v.posterior + v.size * v.states);
    }
};

std::string random_sequence(std::mt19937_64& rng, size_t n,
                            const std::string& alphabet = "ACGTACGTACGTacgtNR") {
    std::string s;
    for (size_t i = 0; i < n; ++i) s += alphabet[rng() % alphabet.size()];
    return s;
}

// seq appended to a contig `piece` bases at a time, as a reader does, with dec.sweep_early
// after each piece.
Contig grow_sweeping(PosteriorDecoder& dec, const std::string& seq, size_t piece, TaskPool& pool,
                     PosteriorDecoder::EarlySweeps& early, const std::string& name = "seq") {
    Contig c;
    c.name = name;
    std::vector<uint8_t> codes;
    for (size_t at = 0; at < seq.size(); at += piece) {
        codes.clear();
        for (size_t i = at; i < std::min(seq.size(), at + piece); ++i)
            codes.push_back(detail::byte_classes()[static_cast<unsigned char>(seq[i])]);
        c.append(codes.data(), static_cast<int64_t>(codes.size()));
        dec.sweep_early(c, pool, early);
    }
    return c;
}

}  // namespace

TEST_CASE("segmented decoding equals exhaustive enumeration, with and without threads",
          "[parallel]") {
    // Oracle: the E-step counts and log-likelihood of test::enumerate (every state path summed
    // from the profile definition) for posterior-derived quantities; posteriors themselves are
    // compared with the sequential engine, which tests/decode.cpp checks against enumeration.
    std::mt19937_64 rng(7001);
    TaskPool pool2(2), pool3(3);
    PosteriorDecoder::EarlySweeps early_sweeps;
    for (int trial = 0; trial < 40; ++trial) {
        const int S = 2 + trial % 3;
        const Profile p = test::random_profile(rng, S, 1 + trial % 2, {trial % 3, (trial + 1) % 3});
        const Model m = compile(p);
        const std::string seq = random_sequence(rng, 2 + rng() % 8);
        const Contig c = test::contig_from(seq);
        const TrainingCounts truth = test::enumerate(p, seq);
        DecoderOptions seq_opt;
        seq_opt.segment_size = -1;
        PosteriorDecoder sequential(m, seq_opt);
        PlainRows reference;
        sequential.run(c, reference);
        for (int64_t segment : {1, 2, 3}) {
            for (int64_t block : {1, 2}) {
                DecoderOptions opt;
                opt.block_size = block;
                opt.segment_size = segment;
                PosteriorDecoder dec(m, opt);
                REQUIRE(dec.splits(c.length) == (c.length > segment));
                Rows rows;
                const DecodeResult r = dec.run(c, rows);
                INFO("trial " << trial << " S " << S << " n " << seq.size() << " segment "
                              << segment);
                REQUIRE(r.log_likelihood == Approx(truth.log_likelihood).epsilon(0).margin(1e-12));
                REQUIRE(rows.posterior.size() == reference.posterior.size());
                for (size_t i = 0; i < rows.posterior.size(); ++i)
                    REQUIRE(rows.posterior[i] ==
                            Approx(reference.posterior[i]).epsilon(0).margin(1e-12));
                for (TaskPool* pool : {&pool2, &pool3}) {  // identical bits with any pool
                    Rows par;
                    const DecodeResult rp = dec.run(c, par, pool);
                    REQUIRE(rp.log_likelihood == r.log_likelihood);
                    REQUIRE(par.posterior == rows.posterior);
                    REQUIRE(par.starts == rows.starts);
                    // and with segments swept while the contig is appended to, base by base
                    const Contig grown = grow_sweeping(dec, seq, 1, *pool, early_sweeps);
                    Rows early;
                    const DecodeResult re = dec.run(grown, early, pool, &early_sweeps);
                    REQUIRE(re.log_likelihood == r.log_likelihood);
                    REQUIRE(early.posterior == rows.posterior);
                    REQUIRE(early.starts == rows.starts);
                }
                // E-step through segments against the enumeration's expected counts.
                CountAccumulator acc(p, m);
                dec.run(c, acc);
                const TrainingCounts& got = acc.counts();
                for (int s = 0; s < S; ++s) {
                    REQUIRE(got.initial[s] == Approx(truth.initial[s]).margin(1e-9));
                    for (int u = 0; u < S; ++u)
                        REQUIRE(got.transitions[s][u] ==
                                Approx(truth.transitions[s][u]).margin(1e-9));
                    for (size_t row = 0; row < truth.emissions[s].size(); ++row)
                        for (int b = 0; b < 4; ++b)
                            REQUIRE(got.emissions[s][row][b] ==
                                    Approx(truth.emissions[s][row][b]).margin(1e-9));
                }
            }
        }
    }
}

TEST_CASE("segmented posteriors equal the sequential engine within 1e-9 on long sequences",
          "[parallel]") {
    // Reference: the sequential checkpointed engine (tests/decode.cpp ties it to enumeration);
    // 300 kbp with unknown runs, 6 to 59 segments.
    std::mt19937_64 rng(7002);
    for (const int S : {1, 2, 4, 6}) {
        const Profile p = test::random_profile(rng, S, std::min(S, 2), {2, 1, 0});
        const Model m = compile(p);
        const Contig c =
            test::contig_from(random_sequence(rng, 300000, "ACGTACGTACGTACGTACGTACGTACGTACGTN"));
        DecoderOptions seq_opt;
        seq_opt.segment_size = -1;
        PosteriorDecoder sequential(m, seq_opt);
        PlainRows reference;
        const DecodeResult want = sequential.run(c, reference);
        for (int64_t segment : {5113, 50000}) {
            DecoderOptions opt;
            opt.block_size = 1000;
            opt.segment_size = segment;
            PosteriorDecoder dec(m, opt);
            TaskPool pool(2);
            Rows rows;
            const DecodeResult got = dec.run(c, rows, &pool);
            INFO("S " << S << " segment " << segment);
            REQUIRE(got.log_likelihood == Approx(want.log_likelihood).epsilon(1e-9));
            double worst = 0;
            for (size_t i = 0; i < rows.posterior.size(); ++i)
                worst = std::max(worst, std::abs(rows.posterior[i] - reference.posterior[i]));
            CHECK(worst <= 1e-9);
        }
    }
}

TEST_CASE("segments swept while the contig is read give the bits of a run after reading",
          "[parallel]") {
    // Reference: run() on the whole contig (the test above ties it to enumeration, test_threads.py
    // to numpy). 300 kbp with unknown runs across segment ends, appended 777 bases at a time, so
    // that sweeps start on prefixes ending inside a run that then grows on; segments of 5113
    // bases (not whole bytes of 4).
    std::mt19937_64 rng(7003);
    TaskPool pool(2);
    for (const int S : {2, 4, 5}) {
        const Profile p = test::random_profile(rng, S, std::min(S, 2), {2, 1, 0, 2, 1});
        const Model m = compile(p);
        std::string seq = random_sequence(rng, 300000, "ACGTACGTACGTACGTACGTacgtN");
        for (const size_t run_begin : {5000, 3 * 5113 - 10, 10 * 5113 + 1, 40 * 5113 - 3000})
            for (size_t i = run_begin; i < run_begin + 4000; ++i) seq[i] = 'N';
        const Contig whole = test::contig_from(seq);
        DecoderOptions opt;
        opt.block_size = 1000;
        opt.segment_size = 5113;
        PosteriorDecoder dec(m, opt);
        Rows want;
        const DecodeResult r = dec.run(whole, want, &pool);
        PosteriorDecoder::EarlySweeps early;
        const Contig grown = grow_sweeping(dec, seq, 777, pool, early);
        // Every segment wholly inside the last whole byte before the end was started early.
        CHECK(early.started() == (300000 / 4 * 4) / 5113);
        Rows got;
        const DecodeResult re = dec.run(grown, got, &pool, &early);
        CHECK(early.started() == 0);
        INFO("S " << S);
        CHECK(re.log_likelihood == r.log_likelihood);
        CHECK(got.posterior == want.posterior);
        CHECK(got.starts == want.starts);
        // A sink that cannot fork decodes in one pass: the early sweeps are dropped.
        PlainRows plain;
        grow_sweeping(dec, seq, 777, pool, early);
        dec.run(grown, plain, &pool, &early);
        DecoderOptions seq_opt;
        seq_opt.segment_size = -1;
        PosteriorDecoder sequential(m, seq_opt);
        PlainRows reference;
        sequential.run(whole, reference);
        CHECK(plain.posterior == reference.posterior);
        // Sweeps of a record never decoded (its reading failed) are waited for and dropped.
        grow_sweeping(dec, seq.substr(0, 100000), 777, pool, early);
        early.reset();
        Rows again;
        dec.run(whole, again, &pool, &early);
        CHECK(again.posterior == want.posterior);
    }
}

TEST_CASE("an impossible segment swept early fails as it does after reading", "[parallel]") {
    // One state that never emits G (as in tests/decode.cpp): the first G is impossible. With the
    // early sweeps the error must be the one of a run after reading, whose text decode.cpp checks.
    const Model m = compile(test::profile_without_g());
    std::string seq(2000, 'A');
    for (size_t i = 1; i < seq.size(); i += 2) seq[i] = 'C';
    seq[1234] = seq[1700] = 'G';
    DecoderOptions opt;
    opt.block_size = 10;
    opt.segment_size = 100;
    PosteriorDecoder dec(m, opt);
    TaskPool pool(2);
    const auto message = [&](const Contig& c, PosteriorDecoder::EarlySweeps* early) {
        Rows rows;
        try {
            dec.run(c, rows, &pool, early);
        } catch (const InputError& e) {
            return std::string(e.what());
        }
        return std::string("no error");
    };
    const std::string want = message(test::contig_from(seq, "chrQ"), nullptr);
    CHECK(want.find("chrQ") != std::string::npos);
    PosteriorDecoder::EarlySweeps early;
    const Contig grown = grow_sweeping(dec, seq, 50, pool, early, "chrQ");
    CHECK(message(grown, &early) == want);
}

TEST_CASE("sinks that cannot fork and models with many states decode in one pass", "[parallel]") {
    std::mt19937_64 rng(7003);
    const Profile p = test::random_profile(rng, 8, 2, {1});
    const Model m = compile(p);
    DecoderOptions opt;
    opt.segment_size = 10;
    PosteriorDecoder dec(m, opt);
    CHECK_FALSE(dec.splits(1000));  // 8 states: a matrix sweep would cost 8 vector sweeps

    const Profile q = test::random_profile(rng, 2, 1, {1});
    const Model mq = compile(q);
    PosteriorDecoder two(mq, opt);
    REQUIRE(two.splits(1000));
    const Contig c = test::contig_from(random_sequence(rng, 1000));
    PlainRows plain;
    Rows forked;
    two.run(c, plain);
    two.run(c, forked);
    REQUIRE(plain.posterior.size() == forked.posterior.size());
    for (size_t i = 0; i < plain.posterior.size(); ++i)
        REQUIRE(plain.posterior[i] == Approx(forked.posterior[i]).margin(1e-12));
}

namespace {

Model two_region_model() {
    Profile p;
    p.name = "t";
    p.regions = {{"isle", true, ""}, {"sea", false, ""}};
    p.states = {{"i", 0, 0, {{0.25, 0.25, 0.25, 0.25}}}, {"s", 1, 0, {{0.25, 0.25, 0.25, 0.25}}}};
    p.initial = {0.5, 0.5};
    p.transitions = {{0.5, 0.5}, {0.5, 0.5}};
    return compile(p);
}

std::vector<double> as_rows(const std::vector<double>& p_isle) {
    std::vector<double> post;
    for (double p : p_isle) {
        post.push_back(p);
        post.push_back(1 - p);
    }
    return post;
}

void feed(DecodeSink& sink, const std::vector<double>& post, int64_t begin, int64_t end,
          int64_t block) {
    for (int64_t s = begin; s < end; s += block) {
        BlockView v;
        v.begin = s;
        v.size = std::min(block, end - s);
        v.states = 2;
        v.posterior = post.data() + 2 * s;
        sink.block(v);
    }
}

// The contig [0, n) decoded as spans cut at `cuts`: the first span into `sink`, every later
// one into a fork that is then joined; end_contig at the end.
template <class Sink>
void run_split(Sink& sink, const Contig& c, const std::vector<double>& post,
               const std::vector<int64_t>& cuts) {
    const int64_t n = static_cast<int64_t>(post.size() / 2);
    sink.begin_contig(c);
    std::vector<int64_t> edges = {0};
    edges.insert(edges.end(), cuts.begin(), cuts.end());
    edges.push_back(n);
    feed(sink, post, edges[0], edges[1], 2);
    for (size_t k = 1; k + 1 < edges.size(); ++k) {
        std::unique_ptr<DecodeSink> f = sink.fork();
        f->begin_contig(c);
        feed(*f, post, edges[k], edges[k + 1], 2);
        sink.join(*f);
    }
    sink.end_contig(c, DecodeResult{});
}

void require_same_calls(const std::vector<Call>& got, const std::vector<Call>& want) {
    REQUIRE(got.size() == want.size());
    for (size_t i = 0; i < got.size(); ++i) {
        CHECK(got[i].begin == want[i].begin);
        CHECK(got[i].end == want[i].end);
        CHECK(got[i].region == want[i].region);
        CHECK(got[i].min_posterior == want[i].min_posterior);  // a minimum does not depend on order
        CHECK(got[i].confident_bases == want[i].confident_bases);  // a count neither
        CHECK(got[i].core_begin == want[i].core_begin);
        CHECK(got[i].core_end == want[i].core_end);
        CHECK(got[i].mean_posterior == Approx(want[i].mean_posterior).epsilon(1e-12));
    }
}

}  // namespace

TEST_CASE("interval calls are the same when the contig is split at every position", "[parallel]") {
    // The sequential pass is tied to hand computation by tests/call.cpp; here it is the
    // reference for every split into two spans and for every pair of cuts into three.
    const Model m = two_region_model();
    const std::vector<std::vector<double>> tracks = {
        {0.1, 0.6, 0.9, 0.2, 0.4, 0.5, 0.0},            // call.cpp: maximal runs
        {0.9, 0.9, 0.2, 0.3, 0.8, 0.1, 0.1, 0.1, 0.7},  // call.cpp: merge gap
        {0.9, 0.1, 0.9, 0.1, 0.1, 0.9, 0.9, 0.9},       // call.cpp: minimum length
        {0.2, 0.96, 0.7, 0.1, 0.99, 0.97, 0.3, 0.2, 0.2, 0.6, 0.1, 0.95, 0.5, 0.2},
    };
    for (const auto& p_isle : tracks) {
        const auto post = as_rows(p_isle);
        const int64_t n = static_cast<int64_t>(p_isle.size());
        const Contig c = test::contig_from(std::string(p_isle.size(), 'C'));
        for (int64_t gap : {0, 1, 2, 3, 4}) {
            for (int64_t min_length : {1, 2, 3}) {
                CallOptions opt;
                opt.merge_gap = gap;
                opt.min_length = min_length;
                opt.high_posterior = 0.95;
                IntervalCaller whole(m, opt);
                run_split(whole, c, post, {});
                for (int64_t i = 1; i < n; ++i) {
                    IntervalCaller two(m, opt);
                    run_split(two, c, post, {i});
                    INFO("gap " << gap << " min length " << min_length << " cut " << i);
                    require_same_calls(two.calls(), whole.calls());
                    for (int64_t j = i + 1; j < n; ++j) {
                        IntervalCaller three(m, opt);
                        run_split(three, c, post, {i, j});
                        INFO("second cut " << j);
                        require_same_calls(three.calls(), whole.calls());
                    }
                }
            }
        }
    }
}

namespace {

std::string slurp(const std::string& path) {
    std::ifstream in(path, std::ios::binary);
    std::ostringstream s;
    s << in.rdbuf();
    return s.str();
}

// bedGraph written independently of PosteriorTracks: each base's value rounded to `digits`,
// runs of equal rounded values merged (the format tidemark documents in track.hpp).
std::string expected_bedgraph(const std::vector<double>& p, int digits, const std::string& name) {
    std::string out;
    const double scale = std::pow(10.0, digits);
    size_t i = 0;
    while (i < p.size()) {
        const long long q = std::llround(p[i] * scale);
        size_t j = i + 1;
        while (j < p.size() && std::llround(p[j] * scale) == q) ++j;
        char line[128];
        std::snprintf(line, sizeof line, "%s\t%zu\t%zu\t%.*f\n", name.c_str(), i, j, digits,
                      static_cast<double>(q) / scale);
        out += line;
        i = j;
    }
    return out;
}

}  // namespace

TEST_CASE("bedGraph tracks are the same when the contig is split at every position", "[parallel]") {
    const Model m = two_region_model();
    const std::vector<double> p_isle = {0.1, 0.1, 0.12, 0.5, 0.5, 0.5,
                                        0.9, 0.1, 0.1,  0.1, 0.3, 0.3};
    const auto post = as_rows(p_isle);
    const int64_t n = static_cast<int64_t>(p_isle.size());
    const Contig c = test::contig_from(std::string(p_isle.size(), 'G'), "chrT");
    const std::string want = expected_bedgraph(p_isle, 1, "chrT");
    for (int64_t i = 0; i < n; ++i) {
        for (int64_t j = i; j < n; ++j) {
            test::TempFile dir("");
            TrackOptions opt;
            opt.prefix = dir.dir() + "/t";
            opt.digits = 1;
            PosteriorTracks tracks(m, opt);
            // Decoded as scan does it: a fork per contig, split into segments inside it.
            std::unique_ptr<DecodeSink> job = tracks.fork();
            std::vector<int64_t> cuts;
            if (i > 0) cuts.push_back(i);
            if (j > i) cuts.push_back(j);
            run_split(*job, c, post, cuts);
            tracks.join(*job);
            tracks.close();
            INFO("cuts " << i << " " << j);
            REQUIRE(slurp(opt.prefix + ".isle.bedgraph") == want);
        }
    }
}

TEST_CASE("bedGraph values are llround's and printf's beside every rounding edge", "[parallel]") {
    // Oracle: std::llround of the value clamped to [0, 1] times 10^digits, printed by snprintf
    // "%.*f" (the rule track.hpp documents), for values on, just below and just above the
    // multiples and half-multiples of 10^-digits, and outside [0, 1]. Blocks of 1001 bases run
    // the four-lane path and its scalar tail.
    const Model m = two_region_model();
    std::mt19937_64 rng(2511);
    for (int digits : {0, 1, 3, 6, 12}) {
        const double scale = std::pow(10.0, digits);
        std::vector<double> p = {0.0, -0.0, 1.0, -1e-300, -0.25, 1.0000001, 2.0, 0.5, 0.05};
        std::uniform_int_distribution<int64_t> units(0, static_cast<int64_t>(scale));
        for (int k = 0; k < 2000; ++k) {
            const auto u = static_cast<double>(units(rng));
            for (const double edge : {u / scale, (u + 0.5) / scale})
                for (const double v :
                     {edge, std::nextafter(edge, -1.0), std::nextafter(edge, 2.0), edge, edge})
                    p.push_back(v);
        }
        std::string want;
        const auto rounded = [&](double v) {
            return std::llround(std::clamp(v, 0.0, 1.0) * scale);
        };
        for (size_t i = 0; i < p.size();) {
            const long long q = rounded(p[i]);
            size_t j = i + 1;
            while (j < p.size() && rounded(p[j]) == q) ++j;
            char line[128];
            std::snprintf(line, sizeof line, "chrT\t%zu\t%zu\t%.*f\n", i, j, digits,
                          static_cast<double>(q) / scale);
            want += line;
            i = j;
        }
        const auto post = as_rows(p);
        const auto n = static_cast<int64_t>(p.size());
        const Contig c = test::contig_from(std::string(p.size(), 'G'), "chrT");
        test::TempFile dir("");
        TrackOptions opt;
        opt.prefix = dir.dir() + "/t";
        opt.digits = digits;
        PosteriorTracks tracks(m, opt);
        tracks.begin_contig(c);
        feed(tracks, post, 0, n, 1001);
        tracks.end_contig(c, DecodeResult{});
        tracks.close();
        INFO("digits " << digits);
        REQUIRE(slurp(opt.prefix + ".isle.bedgraph") == want);
    }
}

TEST_CASE("region totals and E-step counts add up over segments", "[parallel]") {
    // Oracle for the E-step: test::enumerate over all state paths of each contig.
    std::mt19937_64 rng(7004);
    const Profile p = test::random_profile(rng, 3, 2, {1, 0, 2});
    std::vector<Contig> contigs;
    std::vector<std::string> seqs;
    TrainingCounts truth = TrainingCounts::zero(p);
    for (int k = 0; k < 5; ++k) {
        seqs.push_back(random_sequence(rng, 3 + k));
        contigs.push_back(test::contig_from(seqs.back(), "c" + std::to_string(k)));
        truth.add(test::enumerate(p, seqs.back()));
    }
    MemoryTrainingData data(std::move(contigs));
    const TrainingCounts one = expected_counts(p, data, 2, 1);
    REQUIRE(one.log_likelihood == Approx(truth.log_likelihood).epsilon(0).margin(1e-12));
    for (size_t s = 0; s < 3; ++s)
        for (size_t u = 0; u < 3; ++u)
            REQUIRE(one.transitions[s][u] == Approx(truth.transitions[s][u]).margin(1e-9));
    for (int threads : {2, 3}) {  // contigs in a pool, summed in input order: the same bits
        const TrainingCounts t = expected_counts(p, data, 2, threads);
        REQUIRE(t.log_likelihood == one.log_likelihood);
        REQUIRE(t.transitions == one.transitions);
        REQUIRE(t.emissions == one.emissions);
        REQUIRE(t.initial == one.initial);
    }
}

TEST_CASE("the task pool returns errors through futures and runs inline with one thread",
          "[parallel]") {
    TaskPool inline_pool(1);
    int ran = 0;
    auto f = inline_pool.submit([&](int w) { ran = 10 + w; });
    CHECK(ran == 10);  // already run, on worker 0
    f.get();
    TaskPool pool(3);
    std::vector<std::future<void>> done;
    std::vector<int> seen(50, -1);
    for (int i = 0; i < 50; ++i) done.push_back(pool.submit([&seen, i](int w) { seen[i] = w; }));
    for (auto& d : done) d.get();
    for (int w : seen) CHECK((w >= 0 && w < 3));
    auto bad = pool.submit([](int) { throw InputError("boom"); });
    CHECK_THROWS_AS(bad.get(), InputError);
    CHECK(resolve_threads(0) >= 1);
    CHECK(resolve_threads(5) == 5);
}
