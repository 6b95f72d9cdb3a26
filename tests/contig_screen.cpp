// The contig screen (contig_screen.hpp): trinucleotide counts against brute-force enumeration,
// the signature of a de Bruijn sequence (every trinucleotide once, so every relative abundance is
// exactly 1), the limit's log-log interpolation, the profile field, and the fit's refusal on too
// little sequence. The fitted numbers themselves are checked against numpy/scipy in
// tests/oracle/test_contig_screen.py.
#include "tidemark/contig_screen.hpp"

#include <catch2/catch.hpp>
#include <cmath>
#include <random>
#include <string>

#include "test_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/train.hpp"

using namespace tidemark;

namespace {

int code_of(char c) {
    switch (c) {
        case 'A':
            return 0;
        case 'C':
            return 1;
        case 'G':
            return 2;
        case 'T':
            return 3;
        default:
            return -1;
    }
}

std::string random_bases(size_t n, uint32_t seed) {
    std::mt19937 rng(seed);
    std::string s(n, 'A');
    for (auto& c : s) c = "ACGT"[rng() % 4];
    return s;
}

// A linear de Bruijn sequence of order 3 over ACGT (the Lyndon-word construction of Fredricksen,
// Kessler & Maiorana, from memory): the cyclic sequence plus its first two symbols.
std::string de_bruijn_3() {
    std::string out;
    std::vector<int> a(8, 0);
    const auto db = [&](auto&& self, int t, int p) -> void {
        if (t > 3) {
            if (3 % p == 0)
                for (int j = 1; j <= p; ++j) out += "ACGT"[a[static_cast<size_t>(j)]];
        } else {
            a[static_cast<size_t>(t)] = a[static_cast<size_t>(t - p)];
            self(self, t + 1, p);
            for (int j = a[static_cast<size_t>(t - p)] + 1; j < 4; ++j) {
                a[static_cast<size_t>(t)] = j;
                self(self, t + 1, t);
            }
        }
    };
    db(db, 1, 1);
    return out + out.substr(0, 2);
}

}  // namespace

TEST_CASE("trinucleotide counts pool both strands over known bases, like enumeration") {
    std::string s = random_bases(150000, 7);
    for (size_t i = 65530; i < 65540; ++i) s[i] = 'N';  // a gap across the 64 Ki reading chunk
    s[100] = 'n';
    s[131075] = 'R';
    const Contig c = test::contig_from(s);
    for (const auto& [begin, end] :
         {std::pair<int64_t, int64_t>{0, 150000}, {65000, 140001}, {99, 103}}) {
        std::array<int64_t, 64> expected{};
        int64_t known = 0;
        for (int64_t i = begin; i < end; ++i) known += code_of(s[static_cast<size_t>(i)]) >= 0;
        for (int64_t i = begin; i + 2 < end; ++i) {
            const int x = code_of(s[static_cast<size_t>(i)]),
                      y = code_of(s[static_cast<size_t>(i + 1)]),
                      z = code_of(s[static_cast<size_t>(i + 2)]);
            if (x < 0 || y < 0 || z < 0) continue;
            ++expected[static_cast<size_t>(16 * x + 4 * y + z)];
            ++expected[static_cast<size_t>(16 * (3 - z) + 4 * (3 - y) + (3 - x))];  // other strand
        }
        const TrinucleotideCounts got = trinucleotide_counts(c, begin, end);
        CHECK(got.n == expected);
        CHECK(got.known == known);
    }
}

TEST_CASE("a de Bruijn sequence has every trinucleotide relative abundance 1 (log 0)") {
    const std::string s = de_bruijn_3();
    REQUIRE(s.size() == 66);
    const TrinucleotideCounts counts = trinucleotide_counts(test::contig_from(s), 0, 66);
    for (const int64_t n : counts.n) REQUIRE(n == 2);  // once per strand
    for (const double r : trinucleotide_signature(counts)) CHECK(std::abs(r) < 1e-15);
}

TEST_CASE("the limit interpolates log-log between the table's lengths and clamps outside") {
    ContigScreen s;
    s.center.assign(screen_dimensions, 0.0);
    s.lengths = {5000, 20000, 80000};
    s.limits = {100.0, 50.0, 40.0};
    CHECK(std::isnan(screen_limit(s, 4999)));
    CHECK(screen_limit(s, 5000) == 100.0);
    CHECK(screen_limit(s, 10000) ==
          Approx(std::sqrt(100.0 * 50.0)).epsilon(1e-12));  // halfway in log
    CHECK(screen_limit(s, 40000) == Approx(std::sqrt(50.0 * 40.0)).epsilon(1e-12));
    CHECK(screen_limit(s, 80000) == 40.0);
    CHECK(screen_limit(s, 5000000) == 40.0);
}

TEST_CASE("a profile's contig screen survives JSON and a malformed one names its field") {
    Profile p = load_profile("composition-shift");
    p.is_template = false;
    ContigScreen& s = p.contig_screen;
    for (int i = 0; i < screen_dimensions; ++i) s.center.push_back(0.01 * i - 0.1);
    s.precision.assign(screen_dimensions * screen_dimensions, 0.0);
    for (int i = 0; i < screen_dimensions; ++i)
        s.precision[static_cast<size_t>(i * (screen_dimensions + 1))] = 2.5 + i;
    s.lengths = {5000, 10000};
    s.limits = {120.25, 80.5};
    const std::string text = to_json(p);
    const Profile back = parse_profile(text, "p.json");
    CHECK(back.contig_screen.center == s.center);
    CHECK(back.contig_screen.precision == s.precision);
    CHECK(back.contig_screen.lengths == s.lengths);
    CHECK(back.contig_screen.limits == s.limits);
    CHECK(compile(back).contig_screen != nullptr);
    CHECK(compile(load_profile("gc-shift")).contig_screen == nullptr);

    const auto fails_on = [&](const std::string& from, const std::string& to,
                              const std::string& field) {
        std::string bad = text;
        const size_t at = bad.find(from);
        REQUIRE(at != std::string::npos);
        bad.replace(at, from.size(), to);
        try {
            parse_profile(bad, "p.json");
            FAIL("accepted: " << to);
        } catch (const ProfileError& e) {
            CHECK_THAT(e.what(), Catch::Contains(field));
        }
    };
    fails_on("\"known_bases\": 10000", "\"known_bases\": 5000",
             "contig_screen.limits[1].known_bases");
    fails_on("\"distance\": 80.5", "\"distance\": -1", "contig_screen.limits[1].distance");
    fails_on("\"center\": [", "\"center\": [1,", "contig_screen.center");
}

TEST_CASE("fit makes no screen from too few 5-kb stretches with half their bases known") {
    std::vector<Contig> contigs;
    contigs.push_back(test::contig_from(random_bases(45000, 3), "nine_stretches"));
    std::string gappy = random_bases(20000, 4);  // four stretches, none half known
    for (size_t i = 0; i < gappy.size(); ++i)
        if (i % 5000 < 2600) gappy[i] = 'N';
    contigs.push_back(test::contig_from(gappy, "gappy"));
    MemoryTrainingData few(std::move(contigs));
    CHECK_FALSE(fit_contig_screen(few).present());

    // Eleven stretches cannot give the spread of 32 values (a singular covariance): no screen.
    std::vector<Contig> eleven;
    eleven.push_back(test::contig_from(random_bases(55000, 5), "eleven_stretches"));
    MemoryTrainingData too_few(std::move(eleven));
    CHECK_FALSE(fit_contig_screen(too_few).present());

    std::vector<Contig> more;
    more.push_back(test::contig_from(random_bases(400000, 6), "eighty_stretches"));
    MemoryTrainingData enough(std::move(more));
    const ContigScreen s = fit_contig_screen(enough);
    REQUIRE(s.present());
    CHECK(s.lengths == std::vector<int64_t>{5000, 10000, 20000});  // 8 stretches of 50 kb: too few
    CHECK(s.limits.front() > 0);
}
