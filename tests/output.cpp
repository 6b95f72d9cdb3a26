// Output files: atomic replacement, clean-up on failure, detected write errors.
#include "tidemark/output.hpp"

#include <sys/stat.h>

#include <catch2/catch.hpp>
#include <fstream>
#include <sstream>

#include "test_util.hpp"
#include "tidemark/error.hpp"

using namespace tidemark;

namespace {
std::string slurp(const std::string& path) {
    std::ifstream in(path);
    std::stringstream s;
    s << in.rdbuf();
    return s.str();
}
bool exists(const std::string& path) {
    struct stat st {};
    return stat(path.c_str(), &st) == 0;
}
size_t files_in(const std::string& dir) {
    size_t n = 0;
    const std::string cmd = "ls -A '" + dir + "' | wc -l";
    FILE* p = popen(cmd.c_str(), "r");
    if (p && fscanf(p, "%zu", &n) != 1) n = 0;
    if (p) pclose(p);
    return n;
}
}  // namespace

TEST_CASE("an output appears only on commit and replaces the old file", "[output]") {
    test::TempFile old("previous content\n");
    {
        OutputFile out(old.path());
        out.write("new ");
        CHECK(slurp(old.path()) == "previous content\n");  // untouched while writing
        out.write("content\n");
        out.commit();
    }
    CHECK(slurp(old.path()) == "new content\n");
    CHECK(files_in(old.dir()) == 1);  // no temporary left behind
}

TEST_CASE("an output abandoned by an exception leaves the old file and no temporary", "[output]") {
    test::TempFile old("keep me\n");
    try {
        OutputFile out(old.path());
        out.write("half-written");
        throw InputError("bad input halfway");
    } catch (const InputError&) {
    }
    CHECK(slurp(old.path()) == "keep me\n");
    CHECK(files_in(old.dir()) == 1);
    const std::string fresh = old.dir() + "/fresh.bed";
    try {
        OutputFile out(fresh);
        out.write("x");
        throw InputError("stop");
    } catch (const InputError&) {
    }
    CHECK_FALSE(exists(fresh));
}

TEST_CASE("a tabix index that cannot be built leaves the earlier data and index as they were",
          "[output]") {
    // htslib's tabix indexer refuses lines out of position order (hts_idx_push: "unsorted
    // positions"), which stands in here for any failure of the index.
    test::TempFile old("earlier data\n", ".bed.gz");
    const std::string earlier_index = old.path() + ".tbi";
    std::ofstream(earlier_index) << "earlier index\n";
    OutputFormat format;
    format.bgzip = true;
    format.tabix = true;
    {
        OutputFile out(old.path(), format);
        out.write("chr1\t100\t200\nchr1\t10\t20\n");
        CHECK_THROWS_AS(out.commit(), IoError);
    }
    CHECK(slurp(old.path()) == "earlier data\n");
    CHECK(slurp(earlier_index) == "earlier index\n");
    CHECK(files_in(old.dir()) == 2);  // no temporary data or index left behind
}

TEST_CASE("write errors are reported", "[output]") {
    // A full disk on standard output is exercised end to end in tests/cli (/dev/full).
    CHECK_THROWS_AS(OutputFile("/nonexistent-folder/x.bed"), IoError);
    test::TempFile f("x");
    CHECK_THROWS_AS(OutputFile(f.dir() + "/"), IoError);  // a folder, not a file
}
