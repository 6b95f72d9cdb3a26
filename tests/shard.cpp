// Sharding: "I/N" parsing, the longest-first assignment against Graham's bound and exhaustive
// enumeration, exact cover of the records by the shard filters, and the shard-free command.
#include "tidemark/shard.hpp"

#include <sys/stat.h>
#include <zlib.h>

#include <algorithm>
#include <catch2/catch.hpp>
#include <random>

#include "test_util.hpp"
#include "tidemark/error.hpp"
#include "tidemark/scan.hpp"

using namespace tidemark;
using test::TempFile;

namespace {

// The smallest possible largest load over all count^n assignments (exhaustive enumeration).
int64_t best_makespan(const std::vector<int64_t>& lengths, int count) {
    const size_t n = lengths.size();
    int64_t best = INT64_MAX;
    std::vector<int> choice(n, 0);
    while (true) {
        std::vector<int64_t> load(static_cast<size_t>(count), 0);
        for (size_t i = 0; i < n; ++i) load[static_cast<size_t>(choice[i])] += lengths[i];
        best = std::min(best, *std::max_element(load.begin(), load.end()));
        size_t i = 0;
        while (i < n && ++choice[i] == count) choice[i++] = 0;
        if (i == n) break;
    }
    return best;
}

int64_t makespan(const std::vector<int64_t>& lengths, const std::vector<int>& shard, int count) {
    std::vector<int64_t> load(static_cast<size_t>(count), 0);
    for (size_t i = 0; i < lengths.size(); ++i) load[static_cast<size_t>(shard[i])] += lengths[i];
    return *std::max_element(load.begin(), load.end());
}

}  // namespace

TEST_CASE("parse_shard accepts I/N and names bad text") {
    const ShardSpec s = parse_shard("2/8");
    CHECK(s.index == 2);
    CHECK(s.count == 8);
    CHECK(s.active());
    CHECK_FALSE(ShardSpec{}.active());
    for (const char* bad :
         {"0/3", "4/3", "3", "/3", "1/", "a/b", "1/0", "-1/3", "1/3/4", "1 /3", "1/1000000"})
        CHECK_THROWS_AS(parse_shard(bad), UsageError);
}

TEST_CASE("assign_shards: a hand-worked example") {
    // Lengths 120 75 64 50 30 8 1 over 3 shards, longest first to the least loaded (ties: lower
    // shard): 120->1; 75->2; 64->3; 50->3 (64<75); 30->2 (75<114); 8->2 (105<114); 1->2 (113<114).
    const std::vector<int64_t> lengths = {50, 120, 8, 30, 75, 1, 64};
    const std::vector<int> expected = {2, 0, 1, 1, 1, 1, 2};
    CHECK(assign_shards(lengths, 3) == expected);
    // Ties in length go by input order: the first of two equal records gets the lower shard.
    CHECK(assign_shards({5, 5, 5, 5}, 2) == std::vector<int>{0, 1, 0, 1});
    // More shards than records: the extra shards are empty.
    CHECK(assign_shards({3, 9}, 4) == std::vector<int>{1, 0});
}

TEST_CASE("assign_shards stays within Graham's 4/3 - 1/(3N) bound of the exhaustive optimum") {
    // Graham 1969, "Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17:416-429:
    // longest-processing-time-first scheduling is within (4/3 - 1/(3m)) of the optimum.
    std::mt19937_64 rng(11);
    std::uniform_int_distribution<int64_t> len(0, 1000);
    for (int trial = 0; trial < 300; ++trial) {
        const int count = 2 + trial % 3;
        const size_t n = 1 + static_cast<size_t>(trial % 8);
        std::vector<int64_t> lengths(n);
        for (auto& x : lengths) x = len(rng);
        const std::vector<int> shard = assign_shards(lengths, count);
        REQUIRE(shard.size() == n);
        for (int s : shard) REQUIRE((s >= 0 && s < count));
        const int64_t got = makespan(lengths, shard, count);
        const int64_t best = best_makespan(lengths, count);
        const double bound = (4.0 / 3.0 - 1.0 / (3.0 * count)) * static_cast<double>(best);
        INFO("trial " << trial << ": makespan " << got << ", optimum " << best);
        CHECK(static_cast<double>(got) <= bound + 1e-9);
        CHECK(assign_shards(lengths, count) == shard);  // deterministic
    }
}

TEST_CASE("shard filters cover every record exactly once, from a built index and from a pass") {
    std::string fasta;
    const std::vector<int> lengths = {70, 10, 0, 250, 33, 70, 5, 120};
    for (size_t i = 0; i < lengths.size(); ++i) {
        fasta += ">r" + std::to_string(i) + " description\n";
        std::string seq;
        for (int k = 0; k < lengths[i]; ++k) seq += "ACGT"[(k * 7 + static_cast<int>(i)) % 4];
        for (size_t k = 0; k < seq.size(); k += 60) fasta += seq.substr(k, 60) + "\n";
    }
    TempFile file(fasta, ".fa");
    for (int pass = 0; pass < 2; ++pass) {  // 0: builds FILE.fa.fai; 1: reads it
        // faidx (htslib) leaves the empty record r2 out of its index; the filter must still place
        // it.
        const std::vector<ShardUnit> units = list_units({file.path()}, {});
        REQUIRE(units.size() == lengths.size() - 1);
        for (size_t i = 0, u = 0; i < lengths.size(); ++i) {
            if (lengths[i] == 0) continue;
            CHECK(units[u].name == "r" + std::to_string(i));
            CHECK(units[u].length == lengths[i]);  // written above
            ++u;
        }
        struct stat st {};
        CHECK(stat((file.path() + ".fai").c_str(), &st) == 0);
        for (int n : {1, 3, 8, 11}) {
            std::vector<int> taken(lengths.size(), 0);
            for (int i = 1; i <= n; ++i) {
                ShardFilter filter(ShardSpec{i, n}, {file.path()}, {}, 0);
                auto source = open_fasta(file.path());
                Contig c;
                while (source->next(c))
                    if (filter.take(c)) ++taken[static_cast<size_t>(filter.record_index())];
                filter.finish();
                CHECK(filter.records() == static_cast<int64_t>(lengths.size()));
            }
            for (int t : taken) CHECK(t == 1);
        }
    }
}

TEST_CASE("shard lengths of plain gzip come from one pass over the records") {
    TempFile file("", ".fa.gz");
    gzFile gz =
        gzopen(file.path().c_str(), "wb");  // zlib writes plain gzip, which faidx cannot index
    REQUIRE(gz);
    gzputs(gz, ">a\nACGTN\n>b\nAC\n");
    REQUIRE(gzclose(gz) == Z_OK);
    const std::vector<ShardUnit> units = list_units({file.path()}, {});
    REQUIRE(units.size() == 2);
    CHECK(units[0].name == "a");
    CHECK(units[0].length == 5);
    CHECK(units[1].name == "b");
    CHECK(units[1].length == 2);
    struct stat st {};
    CHECK(stat((file.path() + ".fai").c_str(), &st) != 0);  // no index for plain gzip
}

TEST_CASE("a stale index is detected instead of giving overlapping shards") {
    TempFile file(">a\nACGT\n>b\nACGT\n", ".fa");
    // An index claiming other records, newer than the file.
    std::ofstream(file.path() + ".fai") << "x\t4\t3\t4\t5\nb\t4\t11\t4\t5\n";
    ShardFilter filter(ShardSpec{1, 2}, {file.path()}, {}, 0);
    auto source = open_fasta(file.path());
    Contig c;
    REQUIRE(source->next(c));
    CHECK_THROWS_AS(filter.take(c), InputError);
}

TEST_CASE("standard input is refused with --shard") {
    CHECK_THROWS_AS(list_units({"-"}, {}), UsageError);
}

TEST_CASE("recorded_command_line drops --shard and --threads in every spelling, nothing else") {
    CHECK(recorded_command_line("tidemark scan g.fa --shard 2/3 -o x.bed") ==
          "tidemark scan g.fa -o x.bed");
    CHECK(recorded_command_line("tidemark scan --shard=1/4 g.fa") == "tidemark scan g.fa");
    CHECK(recorded_command_line("tidemark scan g.fa --shard 1/2") == "tidemark scan g.fa");
    CHECK(recorded_command_line("tidemark scan -t 3 g.fa -t2 --threads 4 --threads=1 -q") ==
          "tidemark scan g.fa -q");
    // A quoted word that merely contains the text stays as it is; -tx is not a thread count.
    CHECK(recorded_command_line("tidemark scan 'a --shard 1/2.fa' -q") ==
          "tidemark scan 'a --shard 1/2.fa' -q");
    CHECK(recorded_command_line("tidemark scan -tx g.fa") == "tidemark scan -tx g.fa");
    CHECK(recorded_command_line("tidemark scan g.fa") == "tidemark scan g.fa");
}
