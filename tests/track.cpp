// Track writers: bgzip+tabix output queried through htslib's tbx API, GFF3 escaping and layout.
#include "tidemark/track.hpp"

#include <htslib/hts.h>
#include <htslib/kstring.h>
#include <htslib/tbx.h>

#include <catch2/catch.hpp>

#include "test_util.hpp"

using namespace tidemark;

namespace {

std::vector<std::string> query(const std::string& path, const std::string& region) {
    htsFile* fp = hts_open(path.c_str(), "r");
    REQUIRE(fp);
    tbx_t* tbx = tbx_index_load(path.c_str());
    REQUIRE(tbx);
    std::vector<std::string> lines;
    hts_itr_t* itr = tbx_itr_querys(tbx, region.c_str());
    kstring_t s = {0, 0, nullptr};
    while (itr && tbx_itr_next(fp, tbx, itr, &s) >= 0) lines.emplace_back(s.s, s.l);
    free(s.s);
    hts_itr_destroy(itr);
    tbx_destroy(tbx);
    hts_close(fp);
    return lines;
}

}  // namespace

TEST_CASE("bgzip + tabix outputs answer region queries through htslib's tbx API", "[track]") {
    // Independent reader: htslib's tabix iterator over the index we wrote.
    test::TempFile dir("");
    const std::string path = dir.dir() + "/calls.bed.gz";
    const std::vector<std::string> lines = {"chrA\t10\t20\tx", "chrA\t15\t40\ty",
                                            "chrA\t100\t200\tz", "chrB\t0\t5\tw"};
    {
        OutputFormat f;
        f.bgzip = true;
        f.tabix = true;
        f.skip_lines = 1;  // the track line
        OutputFile out(path, f);
        out.write("track name=\"t\"\n#chrom\tstart\tend\tname\n");
        for (const auto& l : lines) out.write(l + "\n");
        out.commit();
    }
    // tabix regions are 1-based inclusive: chrA:21-101 is 0-based [20, 101).
    CHECK(query(path, "chrA:21-101") == std::vector<std::string>{lines[1], lines[2]});
    CHECK(query(path, "chrA:1-10").empty());
    CHECK(query(path, "chrA:11-11") == std::vector<std::string>{lines[0]});
    CHECK(query(path, "chrB") == std::vector<std::string>{lines[3]});
}

TEST_CASE("GFF3 lines: 1-based coordinates, SO types, escaped names", "[track]") {
    Profile p;
    p.name = "t";
    p.regions = {{"cpg_island", true, ""}, {"gc;rich", true, ""}};
    p.states = {{"i", 0, 0, {{0.25, 0.25, 0.25, 0.25}}}, {"g", 1, 0, {{0.25, 0.25, 0.25, 0.25}}}};
    p.initial = {0.5, 0.5};
    p.transitions = {{0.5, 0.5}, {0.5, 0.5}};
    const Model m = compile(p);
    Contig c = test::contig_from("CGCGAAAA", "chr 1");
    c.offset = 100;
    Call k;
    k.begin = 0;
    k.end = 4;
    k.mean_posterior = 0.9;
    k.min_posterior = 0.8;
    k.composition = composition(c, 0, 4);
    // GFF3 specification 1.26: column 1 escapes spaces; attribute values escape ; = & ,.
    CHECK(format_gff3_sequence_region(c) == "##sequence-region chr%201 1 108\n");
    const std::string island = format_gff3_feature(m, c, k, 1);
    CHECK(island.rfind("chr%201\ttidemark\tCpG_island\t101\t104\t0.9000\t.\t.\tID=cpg_island_1;",
                       0) == 0);
    CHECK(island.find("Ontology_term=SO:0000307") != std::string::npos);
    k.region = 1;
    const std::string other = format_gff3_feature(m, c, k, 2);
    CHECK(other.find("\tregion\t101\t104\t") != std::string::npos);
    CHECK(other.find("ID=gc%3Brich_2;Name=gc%3Brich;Ontology_term=SO:0000001") !=
          std::string::npos);
}
