// Labelled counting against hand counts on a small example, and its input errors.
#include <fmt/format.h>

#include <catch2/catch.hpp>

#include "test_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/train.hpp"

using namespace tidemark;
using Catch::Matchers::Contains;

namespace {

Profile labelled_profile(int isl_min, int bg_min) {
    return parse_profile(fmt::format(R"({{
      "format": "tidemark-profile/1", "name": "lab",
      "regions": [{{"name": "isl", "report": true, "min_length": {}}},
                  {{"name": "bg", "report": false, "min_length": {}}}],
      "states": [{{"name": "i", "region": "isl", "order": 1, "emissions": [[0.25,0.25,0.25,0.25],
                   [0.25,0.25,0.25,0.25],[0.25,0.25,0.25,0.25],[0.25,0.25,0.25,0.25]]}},
                 {{"name": "o", "region": "bg", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]}}],
      "initial": {{"i": 0.5, "o": 0.5}},
      "transitions": {{"i": {{"i": 0.9, "o": 0.1}}, "o": {{"o": 0.9, "i": 0.1}}}}}})",
                                     isl_min, bg_min),
                         "lab");
}

std::vector<Contig> contigs(int64_t offset = 0) {
    std::vector<Contig> v;
    v.push_back(test::contig_from("ACGCGNTTAC", "c1"));
    v.back().offset = offset;
    v.push_back(test::contig_from("GGTA", "c2"));
    return v;
}

const Logger quiet(LogLevel::quiet);

}  // namespace

TEST_CASE("Labelled counts equal hand counts", "[train]") {
    // c1 = A C G C G N T T A C with bases 2..5 (G C G N) labelled isl, the rest bg; c2 = G G T A
    // unlabelled (all bg). By hand:
    //   initial: bg twice (both contigs start in bg)
    //   c1 steps: o->o at 0-1, 6-7, 7-8, 8-9; o->i at 1-2; i->i at 2-3, 3-4, 4-5; i->o at 5-6
    //   c2 steps: o->o three times
    //   bg (order 0) emits A C T T A C and G G T A: A 3, C 2, G 2, T 3
    //   isl (order 1) emits G after C (pos 2), C after G (pos 3), G after C (pos 4); N nothing
    const Profile p = labelled_profile(1, 1);
    for (int64_t offset : {int64_t{0}, int64_t{100}}) {
        MemoryTrainingData data(contigs(offset));
        const std::vector<Interval> labels = {{"c1", offset + 2, offset + 6, "isl"}};
        const TrainingCounts c = labelled_counts(p, data, labels, "bg", quiet);
        INFO("offset " << offset);
        CHECK(c.initial == std::vector<double>{0, 2});
        CHECK(c.transitions[1][1] == 7);
        CHECK(c.transitions[1][0] == 1);
        CHECK(c.transitions[0][0] == 3);
        CHECK(c.transitions[0][1] == 1);
        CHECK(c.emissions[1][0] == std::array<double, 4>{3, 2, 2, 3});
        CHECK(c.emissions[0][1] == std::array<double, 4>{0, 0, 2, 0});  // after C
        CHECK(c.emissions[0][2] == std::array<double, 4>{0, 1, 0, 0});  // after G
        CHECK(c.emissions[0][0] == std::array<double, 4>{0, 0, 0, 0});
        CHECK(c.chain_steps == std::vector<double>{0, 0});
        CHECK(c.known == 13);
        CHECK(c.positions == 14);
    }
}

TEST_CASE("Labelled counts record chain steps and reject short segments", "[train]") {
    // isl min_length 4: its segment (bases 2..5) makes forced steps 2-3, 3-4, 4-5. bg min_length 2:
    // forced steps 0-1 and 6-7 in c1 and 0-1 in c2.
    {
        MemoryTrainingData data(contigs());
        const TrainingCounts c =
            labelled_counts(labelled_profile(4, 2), data, {{"c1", 2, 6, "isl"}}, "bg", quiet);
        CHECK(c.chain_steps == std::vector<double>{3, 3});
        CHECK(c.transitions[0][0] == 3);
    }
    {
        MemoryTrainingData data(contigs());
        CHECK_THROWS_WITH(
            labelled_counts(labelled_profile(5, 1), data, {{"c1", 2, 6, "isl"}}, "bg", quiet),
            Contains("'isl' at 3-6 (1-based) is 4 bp, shorter than the region's min_length 5"));
    }
    {
        // A segment cut by the contig end may be shorter: c2 is all bg (4 bases) with min_length 6,
        // and c1 ends in a 4-base bg segment.
        MemoryTrainingData data(contigs());
        CHECK_NOTHROW(
            labelled_counts(labelled_profile(1, 6), data, {{"c1", 0, 6, "isl"}}, "bg", quiet));
    }
}

TEST_CASE("Labelled counting reports unusable labels", "[train]") {
    const Profile p = labelled_profile(1, 1);
    MemoryTrainingData data(contigs());
    CHECK_THROWS_WITH(labelled_counts(p, data, {{"c1", 2, 6, "exon"}}, "bg", quiet),
                      Contains("interval 'c1 2 6 exon' (BED: 0-based, half-open)") &&
                          Contains("regions: isl, bg"));
    CHECK_THROWS_WITH(
        labelled_counts(p, data, {{"c1", 2, 6, "isl"}, {"c1", 5, 8, "bg"}}, "bg", quiet),
        Contains("overlap"));
    CHECK_THROWS_AS(labelled_counts(p, data, {}, "nosuch", quiet), UsageError);
    const Profile two = parse_profile(R"({
      "format": "tidemark-profile/1", "name": "two",
      "regions": [{"name": "r", "report": true}],
      "states": [{"name": "x", "region": "r", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]},
                 {"name": "y", "region": "r", "order": 0, "emissions": [[0.25,0.25,0.25,0.25]]}],
      "initial": {"x": 1}, "transitions": {"x": {"y": 1}, "y": {"x": 1}}})",
                                      "two");
    CHECK_THROWS_WITH(labelled_counts(two, data, {}, "r", quiet),
                      Contains("exactly one state per region"));
}
