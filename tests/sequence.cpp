// FASTA reader, compression handling, faidx regions and composition, on hand-made inputs.
#include "tidemark/sequence.hpp"

#include <htslib/faidx.h>

#include <catch2/catch.hpp>
#include <cstdlib>
#include <fstream>
#include <sstream>

#include "fai_index.hpp"
#include "test_util.hpp"
#include "tidemark/error.hpp"

using namespace tidemark;
using test::TempFile;

namespace {

std::string decode(const Contig& c) {
    std::string s;
    for (int64_t i = 0; i < c.length; ++i) s += "ACGTN"[c.base(i)];
    return s;
}

std::vector<std::pair<std::string, std::string>> read_all(const std::string& path) {
    auto src = open_fasta(path);
    Contig c;
    std::vector<std::pair<std::string, std::string>> out;
    while (src->next(c)) out.emplace_back(c.name, decode(c));
    return out;
}

std::string error_of(const std::function<void()>& f) {
    try {
        f();
    } catch (const InputError& e) {
        return e.what();
    }
    return "";
}

using Records = std::vector<std::pair<std::string, std::string>>;

}  // namespace

TEST_CASE("FASTA basics: names, line ends, case, ambiguity codes, whitespace", "[sequence]") {
    SECTION("LF, several records, name is the first word") {
        TempFile f(">chr1 some description\nACGT\nacgt\n>chr2\tx\nNNRY\n");
        CHECK(read_all(f.path()) == Records{{"chr1", "ACGTACGT"}, {"chr2", "NNNN"}});
    }
    SECTION("CRLF and no final newline") {
        TempFile f(">a\r\nAC\r\nGT\r\n>b\r\nTT");
        CHECK(read_all(f.path()) == Records{{"a", "ACGT"}, {"b", "TT"}});
    }
    SECTION("CR-only line ends") {
        TempFile f(">a\rAC\rGT\r>b\rTT\r");
        CHECK(read_all(f.path()) == Records{{"a", "ACGT"}, {"b", "TT"}});
    }
    SECTION("blank lines, spaces and tabs inside sequence lines are skipped") {
        TempFile f("\n\n>a\nAC GT\n\n\tAC\n\n>b\n\nG\n");
        CHECK(read_all(f.path()) == Records{{"a", "ACGTAC"}, {"b", "G"}});
    }
    SECTION("every IUPAC ambiguity code is unknown; lowercase is counted as soft-masked") {
        TempFile f(">a\nNRYSWKMBDHVnryswkmbdhvAcGt\n");
        auto src = open_fasta(f.path());
        Contig c;
        REQUIRE(src->next(c));
        CHECK(decode(c) == std::string(22, 'N') + "ACGT");
        CHECK(c.unknown_count() == 22);
        CHECK(c.unknown.size() == 1);
        CHECK(c.soft_masked == 11 + 2);
    }
    SECTION("a header with no sequence gives an empty record") {
        TempFile f(">empty\n>full\nAC\n");
        CHECK(read_all(f.path()) == Records{{"empty", ""}, {"full", "AC"}});
    }
    SECTION("an empty file has no records") {
        TempFile f("");
        CHECK(read_all(f.path()).empty());
    }
}

TEST_CASE("FASTA errors name file, record and line", "[sequence]") {
    SECTION("illegal character") {
        TempFile f(">a\nACGT\nAC*T\n");
        const std::string msg = error_of([&] { read_all(f.path()); });
        CHECK(msg.find(f.path() + ":3:") != std::string::npos);
        CHECK(msg.find("record 'a'") != std::string::npos);
        CHECK(msg.find("'*'") != std::string::npos);
        CHECK(msg.find("column 3") != std::string::npos);
    }
    SECTION("digits, dashes and NUL bytes are illegal") {
        for (const std::string bad :
             {std::string("AC1T"), std::string("AC-T"), std::string("AC\0T", 4)}) {
            TempFile f(">a\n" + bad + "\n");
            CHECK(error_of([&] { read_all(f.path()); }).find(":2:") != std::string::npos);
        }
    }
    SECTION("sequence before the first header") {
        TempFile f("ACGT\n>a\nAC\n");
        CHECK(error_of([&] { read_all(f.path()); }).find("expected a FASTA header") !=
              std::string::npos);
    }
    SECTION("header without a name") {
        TempFile f(">a\nAC\n> b\nAC\n");
        const std::string msg = error_of([&] { read_all(f.path()); });
        CHECK(msg.find(":3:") != std::string::npos);
        CHECK(msg.find("no record name") != std::string::npos);
    }
    SECTION("duplicate record names") {
        TempFile f(">a\nAC\n>b\nAC\n>a\nGG\n");
        const std::string msg = error_of([&] { read_all(f.path()); });
        CHECK(msg.find(":5:") != std::string::npos);
        CHECK(msg.find("duplicate record name 'a'") != std::string::npos);
    }
    SECTION("missing file and directory") {
        CHECK(error_of([] { open_fasta("/nonexistent/x.fa"); }).find("cannot open") !=
              std::string::npos);
        CHECK(error_of([] { open_fasta("/tmp"); }).find("is a directory") != std::string::npos);
    }
}

TEST_CASE("compressed FASTA: gzip, bgzip, xz, bzip2, zstd and truncation", "[sequence]") {
    // The compressors are the standard Debian command-line tools (gzip, bgzip from tabix,
    // xz-utils, bzip2, zstd), independent of the reader under test.
    TempFile plain(">a\nACGTNNacgt\n>b\nGGGG\n", ".fa");
    const Records expected{{"a", "ACGTNNACGT"}, {"b", "GGGG"}};
    for (const std::string tool : {"gzip", "bgzip", "xz", "bzip2", "zstd -q"}) {
        const std::string out = plain.dir() + "/c.fa.x";
        REQUIRE(std::system((tool + " -c " + plain.path() + " > " + out).c_str()) == 0);
        INFO(tool);
        CHECK(read_all(out) == expected);
    }
    SECTION("truncated gzip is an error, not a short record") {
        // Random bases, so that a cut compressed stream really loses data.
        std::mt19937_64 rng(5);
        std::string big = ">a\n";
        for (int i = 0; i < 5000; ++i) {
            for (int j = 0; j < 60; ++j) big += "ACGT"[rng() % 4];
            big += '\n';
        }
        TempFile f(big, ".fa");
        for (const std::string tool : {"gzip", "bgzip"}) {
            const std::string gz = f.dir() + "/t.fa.gz";
            REQUIRE(std::system((tool + " -c " + f.path() + " | head -c 30000 > " + gz).c_str()) ==
                    0);
            INFO(tool);
            CHECK(error_of([&] { read_all(gz); }).find("truncated") != std::string::npos);
        }
    }
}

TEST_CASE("the faidx index is htslib's, also where htslib 1.16 cannot build one", "[sequence]") {
    const auto slurp = [](const std::string& path) {
        std::ifstream in(path);
        std::stringstream s;
        s << in.rdbuf();
        return s.str();
    };
    // Oracle: htslib's own builder (fai_build3), on the files it indexes.
    const auto htslib_index = [&](const std::string& text, const std::string& suffix) {
        TempFile f(text, ".fa");
        std::string path = f.path();
        if (suffix == ".gz") {
            REQUIRE(std::system(("bgzip -f " + f.path()).c_str()) == 0);
            path += ".gz";
        }
        REQUIRE(fai_build3(path.c_str(), (path + ".h.fai").c_str(), (path + ".h.gzi").c_str()) ==
                0);
        return slurp(path + ".h.fai");
    };
    const auto our_index = [&](const std::string& text, const std::string& suffix) {
        TempFile f(text, ".fa");
        std::string path = f.path();
        if (suffix == ".gz") {
            REQUIRE(std::system(("bgzip -f " + f.path()).c_str()) == 0);
            path += ".gz";
        }
        REQUIRE(detail::build_fai(path, path + ".t.fai", path + ".t.gzi").empty());
        return slurp(path + ".t.fai");
    };
    const std::string lf = ">a x\nACGTA\nCGTAC\nGT\n>e\n>b\nNNNN\nAC\n\n>c\nACGTACGTACGT\n";
    std::string crlf;
    for (char c : lf) crlf += c == '\n' ? std::string("\r\n") : std::string(1, c);
    for (const std::string suffix : {"", ".gz"}) {
        INFO("suffix '" << suffix << "'");
        CHECK(our_index(lf, suffix) == htslib_index(lf, suffix));
        CHECK(our_index(crlf, suffix) == htslib_index(crlf, suffix));
        // An empty last record: htslib 1.16 fails; its index is that of the file without it.
        CHECK(our_index(lf + ">last\n", suffix) == htslib_index(lf, suffix));
    }
    // CR-only line ends: htslib 1.16 fails; the layout is the LF file's, offsets and widths
    // the same since a lone CR is one byte like LF.
    std::string cr = lf;
    for (char& c : cr)
        if (c == '\n') c = '\r';
    CHECK(our_index(cr, "") == htslib_index(lf, ""));
    TempFile ragged(">a\nACGT\nAC\nACGT\n", ".fa");
    CHECK(detail::build_fai(ragged.path(), ragged.path() + ".fai", "")
              .find("line 4: record 'a' has lines of different lengths") != std::string::npos);
}

TEST_CASE("regions through faidx", "[sequence]") {
    TempFile f(">chr1 desc\nACGTACGTAC\nGTACG\n>chr2\nNNNNAAAA\n", ".fa");
    SECTION("strings resolve 1-based inclusive; whole contigs; index order") {
        const auto r = resolve_regions(f.path(), {"chr2", "chr1:3-12", "chr1:1-1"}, {});
        REQUIRE(r.size() == 3);
        CHECK((r[0].contig == "chr1" && r[0].begin == 0 && r[0].end == 1));
        CHECK((r[1].contig == "chr1" && r[1].begin == 2 && r[1].end == 12));
        CHECK((r[2].contig == "chr2" && r[2].begin == 0 && r[2].end == 8));
        auto src = open_regions(f.path(), r);
        Contig c;
        REQUIRE(src->next(c));
        CHECK(decode(c) == "A");
        REQUIRE(src->next(c));
        CHECK(decode(c) == "GTACGTACGT");
        CHECK(c.offset == 2);
        REQUIRE(src->next(c));
        CHECK(decode(c) == "NNNNAAAA");
        CHECK_FALSE(src->next(c));
    }
    SECTION("thousands separators and open ends") {
        const auto r = resolve_regions(f.path(), {"chr1:1,0-1,5"}, {});
        CHECK((r[0].begin == 9 && r[0].end == 15));
        const auto open = resolve_regions(f.path(), {"chr1:12-"}, {});
        CHECK((open[0].begin == 11 && open[0].end == 15));
    }
    SECTION("BED regions are 0-based half-open") {
        const auto r = resolve_regions(f.path(), {}, {{"chr1", 0, 4, ""}});
        CHECK((r[0].begin == 0 && r[0].end == 4));
    }
    SECTION("errors") {
        CHECK(error_of([&] { resolve_regions(f.path(), {"chr3"}, {}); }).find("no sequence") !=
              std::string::npos);
        CHECK(error_of([&] {
                  resolve_regions(f.path(), {"chr1:5-16"}, {});
              }).find("past the end") != std::string::npos);
        CHECK(error_of([&] { resolve_regions(f.path(), {"chr1:0-5"}, {}); }).find("at least 1") !=
              std::string::npos);
        CHECK(error_of([&] { resolve_regions(f.path(), {"chr1:9-5"}, {}); }).find("before start") !=
              std::string::npos);
        CHECK(error_of([&] {
                  resolve_regions(f.path(), {"chr1:x-5"}, {});
              }).find("not a position") != std::string::npos);
        CHECK(error_of([&] {
                  resolve_regions(f.path(), {"chr1:1-5", "chr1:5-8"}, {});
              }).find("overlap") != std::string::npos);
    }
    SECTION("an empty record is named as such, also the last one") {
        TempFile e(">a\nACGT\n>e\n>b\nAC\n>z\n", ".fa");
        CHECK(error_of([&] {
                  resolve_regions(e.path(), {"e"}, {});
              }).find("record 'e' of " + e.path() + " is empty (0 bases)") != std::string::npos);
        CHECK(error_of([&] {
                  resolve_regions(e.path(), {"z:1-5"}, {});
              }).find("record 'z' of " + e.path() + " is empty") != std::string::npos);
        CHECK(resolve_regions(e.path(), {"b"}, {}).at(0).end == 2);
    }
    SECTION("plain gzip cannot be read by region; bgzip can") {
        const std::string gz = f.dir() + "/p.fa.gz";
        REQUIRE(std::system(("gzip -c " + f.path() + " > " + gz).c_str()) == 0);
        CHECK(error_of([&] { resolve_regions(gz, {"chr1"}, {}); }).find("bgzip") !=
              std::string::npos);
        const std::string bgz = f.dir() + "/b.fa.gz";
        REQUIRE(std::system(("bgzip -c " + f.path() + " > " + bgz).c_str()) == 0);
        const auto r = resolve_regions(bgz, {"chr1:2-4"}, {});
        auto src = open_regions(bgz, r);
        Contig c;
        REQUIRE(src->next(c));
        CHECK(decode(c) == "CGT");
    }
}

TEST_CASE("contig storage round-trips across chunk boundaries and reuse", "[sequence]") {
    Contig c;
    const int64_t n = (int64_t{1} << Contig::chunk_shift) + 1000;
    for (int64_t i = 0; i < n; ++i) c.push(static_cast<uint8_t>((i * 7 + i / 3) % 5));
    std::vector<uint8_t> buf(2500);
    const int64_t start = (int64_t{1} << Contig::chunk_shift) - 1500;
    c.unpack(start, 2500, buf.data());
    for (int64_t k = 0; k < 2500; ++k) REQUIRE(buf[k] == ((start + k) * 7 + (start + k) / 3) % 5);
    c.clear();
    for (int i = 0; i < 8; ++i) c.push(static_cast<uint8_t>(3 - i % 4));
    CHECK(decode(c) == "TGCATGCA");  // reused chunk bits were cleared
}

TEST_CASE("record windows: the record's length, bases only inside the windows", "[sequence]") {
    // 3 lines of 10 bases, CRLF; expected bases written out by hand from the file text.
    TempFile f(">r x\r\nACGTacgtAC\r\nGGGGCCCCNN\r\nTTTTAAAACG\r\n>s\r\nAC\r\n", ".fa");
    resolve_regions(f.path(), {"r"}, {});  // builds the .fai
    const RecordLayout layout{6, 10, 12};  // ">r x\r\n" is 6 bytes; lines of 10 bases + CRLF
    {  // as htslib's index says (name, length, offset, bases per line, bytes per line)
        std::ifstream fai(f.path() + ".fai");
        std::string line;
        std::getline(fai, line);
        CHECK(line == "r\t30\t6\t10\t12");
    }
    Contig c;
    // [2, 13) with lowercase counted in [3, 12); then [25, 30) counted whole.
    read_record_windows(f.path(), "r", 30, layout, {{2, 13, 3, 12}, {25, 30, 25, 30}}, c);
    CHECK(c.length == 30);
    CHECK(decode(c) == "NNGTACGTACGGGNNNNNNNNNNNNAAACG");
    CHECK(c.soft_masked == 4);  // "acgt" at 4..7, all inside [3, 12)
    Contig d;
    read_record_windows(f.path(), "r", 30, layout, {{5, 6, 5, 5}}, d);
    CHECK(d.soft_masked == 0);  // 'c' at 5 is outside the empty count range
    CHECK(d.unknown.size() == 2);
    CHECK_THROWS_AS(read_record_windows(f.path(), "r", 30, layout, {{5, 31, 5, 5}}, d),
                    InternalError);  // past the end
    TempFile bad(">r\nACGTXCGTAC\n", ".fa");
    CHECK(error_of([&] {
              read_record_windows(bad.path(), "r", 10, {3, 10, 11}, {{2, 8, 2, 8}}, d);
          }).find("illegal character 'X' (byte 0x58) at position 5") != std::string::npos);
}

TEST_CASE("append_unknown equals pushing unknown bases one by one", "[sequence]") {
    for (const int64_t before : {0, 1, 3, 6}) {
        for (const int64_t n :
             {int64_t{0}, int64_t{1}, int64_t{5}, (int64_t{1} << Contig::chunk_shift) + 7}) {
            Contig fast, slow;
            for (int64_t i = 0; i < before; ++i) {
                fast.push(static_cast<uint8_t>(i % 4));
                slow.push(static_cast<uint8_t>(i % 4));
            }
            fast.append_unknown(n);
            for (int64_t i = 0; i < n; ++i) slow.push(base_unknown);
            fast.push(2);
            slow.push(2);
            REQUIRE(fast.length == slow.length);
            REQUIRE(fast.unknown.size() == slow.unknown.size());
            for (size_t k = 0; k < fast.unknown.size(); ++k)
                CHECK((fast.unknown[k].begin == slow.unknown[k].begin &&
                       fast.unknown[k].length == slow.unknown[k].length));
            const Composition a = composition(fast, 0, fast.length),
                              b = composition(slow, 0, slow.length);
            CHECK((a.a == b.a && a.c == b.c && a.g == b.g && a.t == b.t && a.unknown == b.unknown &&
                   a.cpg == b.cpg));
            CHECK(fast.base(fast.length - 1) == 2);
        }
    }
}

TEST_CASE("a shared prefix keeps its bases while the contig grows on", "[sequence]") {
    // Expected bases: the generator below, written independently of the storage. The prefix is
    // taken while chunk 0 is small (it is regrown, then a second chunk added) and while an
    // unknown run crosses its end (the contig's run grows on; the prefix's stops at its end).
    const auto code_at = [](int64_t i) {
        return (i >= 900 && i < 1300) ? uint8_t{base_unknown}
                                      : static_cast<uint8_t>((i * 5 + i / 7) % 4);
    };
    Contig c;
    c.name = "grow";
    for (int64_t i = 0; i < 1003; ++i) c.push(code_at(i));
    CHECK_THROWS_AS(c.shared_prefix(1004), InternalError);  // past the last whole byte
    CHECK_THROWS_AS(c.shared_prefix(1001), InternalError);  // that byte is written again
    const Contig prefix = c.shared_prefix(1000);
    const int64_t n = (int64_t{1} << Contig::chunk_shift) + 5000;
    std::vector<uint8_t> codes;
    for (int64_t i = 1003; i < n; ++i) codes.push_back(code_at(i));
    c.append(codes.data(), static_cast<int64_t>(codes.size()));
    REQUIRE(c.unknown.size() == 1);
    CHECK((c.unknown[0].begin == 900 && c.unknown[0].length == 400));
    CHECK(prefix.name == "grow");
    REQUIRE(prefix.length == 1000);
    REQUIRE(prefix.unknown.size() == 1);
    CHECK((prefix.unknown[0].begin == 900 && prefix.unknown[0].length == 100));
    std::vector<uint8_t> got(1000);
    prefix.unpack(0, 1000, got.data());
    for (int64_t i = 0; i < 1000; ++i) REQUIRE(got[static_cast<size_t>(i)] == code_at(i));
    for (int64_t i = 0; i < n; i += 997) REQUIRE(c.base(i) == code_at(i));
}

TEST_CASE("a watched record is seen as it grows, and read as without watching", "[sequence]") {
    // 10,000 bases in lines of 60, then a second record; the hook every 1,000 bases. Expected:
    // the record's line ends at or past each next 1,000 bases, counted here.
    std::string text = ">first\n";
    std::string bases;
    for (int i = 0; i < 10000; ++i) bases += "ACGTTGCANNAC"[i % 12];
    for (size_t at = 0; at < bases.size(); at += 60) text += bases.substr(at, 60) + "\n";
    text += ">second\nACGT\n";
    const TempFile f(text, ".fa");
    std::vector<int64_t> want;
    for (int64_t next = 1000, end = 60; end < 10060; end += 60) {
        const int64_t len = std::min<int64_t>(end, 10000);  // the last line holds 40
        if (len >= next) {
            want.push_back(len);
            next = len + 1000;
        }
    }
    auto src = open_fasta(f.path());
    std::vector<std::pair<std::string, int64_t>> seen;
    src->watch_growth([&](const Contig& c) { seen.emplace_back(c.name, c.length); }, 1000);
    Contig c;
    Records records;
    while (src->next(c)) records.emplace_back(c.name, decode(c));
    CHECK(records == read_all(f.path()));
    REQUIRE(seen.size() == want.size());
    for (size_t k = 0; k < seen.size(); ++k)
        CHECK((seen[k].first == "first" && seen[k].second == want[k]));
}

TEST_CASE("composition and the observed/expected CpG ratio", "[sequence]") {
    // Hand count of "CGCGAATTNCG": A2 C3 G3 T2, one N; CpG at 0-1, 2-3, 9-10 = 3 (none spans the
    // N). Known length L = 10, o/e = N(CpG) L / (N(C) N(G)) = 3*10/(3*3) = 3.3333 (formula of
    // Gardiner-Garden & Frommer 1987, J. Mol. Biol. 196:261-282); GC = 6/10.
    const Contig c = test::contig_from("CGCGAATTNCG");
    const Composition comp = composition(c, 0, c.length);
    CHECK((comp.a == 2 && comp.c == 3 && comp.g == 3 && comp.t == 2 && comp.unknown == 1));
    CHECK(comp.cpg == 3);
    CHECK(comp.gc_fraction() == Approx(0.6));
    CHECK(comp.cpg_obs_exp() == Approx(10.0 / 3.0));
    // A sub-interval starting at a G does not count the CpG that starts before it.
    CHECK(composition(c, 1, 4).cpg == 1);
    CHECK(std::isnan(composition(test::contig_from("AATT"), 0, 4).cpg_obs_exp()));
}

TEST_CASE("contig_from_text reads text as the FASTA reader reads a record's lines", "[sequence]") {
    const std::string text = "ACgt NNry\tACGT\r\nswkmbdhv\nGGCC";
    // The reference: the same bases as one FASTA record (line ends inside the text become line
    // ends of the file), read by open_fasta.
    TempFile f(">same\n" + text + "\n");
    auto src = open_fasta(f.path());
    Contig expected;
    REQUIRE(src->next(expected));
    Contig c;
    c.name = "same";
    c.offset = 7;
    contig_from_text(text, c);
    CHECK(c.name == "same");
    CHECK(c.offset == 0);
    CHECK(decode(c) == decode(expected));
    CHECK(c.soft_masked == expected.soft_masked);
    CHECK(c.unknown_count() == expected.unknown_count());
    contig_from_text("acgT", c, SoftMasked::unknown);
    CHECK(decode(c) == "NNNT");
    CHECK(error_of([&] { contig_from_text("ACG>T", c); }) ==
          "sequence 'same': illegal character '>' (byte 0x3E) at position 4 (expected A, C, G, T, "
          "N or an IUPAC ambiguity code)");
}
