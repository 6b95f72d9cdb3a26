// `tidemark simulate`: options -> SimulateJob -> run_simulate.
#include "tidemark/simulate.hpp"

#include "commands.hpp"
#include "tidemark/error.hpp"

namespace tidemark::cli {

void add_simulate(CLI::App& app, Context& ctx) {
    auto job = std::make_shared<SimulateJob>();
    auto contigs = std::make_shared<int64_t>(0);
    auto length = std::make_shared<int64_t>(0);
    auto verbose = std::make_shared<bool>(false);
    auto quiet = std::make_shared<bool>(false);

    CLI::App* cmd = app.add_subcommand(
        "simulate", "Draw synthetic contigs from a profile, with the true region segments as BED");
    cmd->add_option("-p,--profile", job->profile, "built-in profile name or profile JSON file")
        ->capture_default_str();
    auto* lengths = cmd->add_option("--lengths", job->simulation.lengths,
                                    "contig lengths in bases, comma-separated (one contig each)")
                        ->delimiter(',')
                        ->allow_extra_args(false);
    auto* n = cmd->add_option("--contigs", *contigs, "number of contigs of --length bases");
    auto* l = cmd->add_option("--length", *length, "length of each of the --contigs contigs");
    n->excludes(lengths)->needs(l);
    l->excludes(lengths)->needs(n);
    cmd->add_option("--seed", job->simulation.seed,
                    "random seed; the same seed gives byte-identical output on every machine")
        ->capture_default_str();
    cmd->add_option("-o,--output", job->output, "FASTA output (- for stdout)")
        ->capture_default_str();
    cmd->add_option("--truth", job->truth,
                    "write the true segments as BED4: chrom, start, end, region");
    cmd->add_option("--line-width", job->line_width,
                    "FASTA bases per line (0 = one line per contig)")
        ->capture_default_str();
    cmd->add_option("--gaps", job->simulation.gap_fraction,
                    "expected fraction of bases in runs of N (assembly gaps), in [0, 1)")
        ->capture_default_str();
    cmd->add_option("--gap-length", job->simulation.gap_mean_length,
                    "mean length of an N run in bases")
        ->capture_default_str();
    cmd->add_option("--prefix", job->simulation.name_prefix,
                    "contig names are PREFIX1, PREFIX2, ...")
        ->capture_default_str();
    cmd->add_flag("-v,--verbose", *verbose, "report bases per region on stderr");
    cmd->add_flag("-q,--quiet", *quiet, "only errors and warnings on stderr");
    cmd->footer(
        "Model: the hidden chain starts from the profile's initial distribution at each contig "
        "and\n"
        "moves at every position, through gaps too; a known base is drawn from its state's row "
        "for\n"
        "the k preceding bases, or from the state's mean row when fewer than k known bases "
        "precede\n"
        "it (contig start, after an N), exactly as 'tidemark scan' assumes when decoding.\n"
        "Gaps: positions alternate between known and N runs with geometric lengths: N runs of "
        "mean\n"
        "--gap-length L, known runs of mean L*(1-F)/F, so a fraction --gaps F of bases is N on\n"
        "average (a contig may start inside a gap). The truth BED covers gap bases with the "
        "region\n"
        "of the hidden state there, so its segments tile every contig.\n"
        "Randomness: xoshiro256** seeded by SplitMix64 with tidemark's own integer sampling (no\n"
        "standard-library distributions), so output depends on the seed and the tidemark version\n"
        "only. Memory does not grow with the length simulated.\n");

    cmd->callback([=, &ctx] {
        const bool by_count = n->count() > 0;
        const LogLevel level = *quiet     ? LogLevel::quiet
                               : *verbose ? LogLevel::verbose
                                          : LogLevel::normal;
        ctx.action = [job, level, by_count, contigs, length] {
            if (by_count) {  // checked here, where main reports errors, not inside parsing
                if (*contigs < 1) throw UsageError("--contigs must be at least 1");
                job->simulation.lengths.assign(static_cast<size_t>(*contigs), *length);
            }
            run_simulate(*job, Logger(level));
            return 0;
        };
    });
}

}  // namespace tidemark::cli
