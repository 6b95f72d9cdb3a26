// `tidemark compare`: options -> CompareJob -> run_compare.
#include "tidemark/compare.hpp"

#include "commands.hpp"

namespace tidemark::cli {

void add_compare(CLI::App& app, Context& ctx) {
    auto job = std::make_shared<CompareJob>();
    auto verbose = std::make_shared<bool>(false);
    auto quiet = std::make_shared<bool>(false);

    CLI::App* cmd = app.add_subcommand(
        "compare", "Score calls against a truth set per region type: base and interval level");
    cmd->add_option("calls", job->calls, "BED3+ of calls, region type in column 4 (- for stdin)")
        ->required();
    cmd->add_option("truth", job->truth, "BED3+ of true segments, region type in column 4")
        ->required();
    cmd->add_option("--name", job->options.name,
                    "score every interval of both files as this one type");
    cmd->add_option("--type", job->options.types,
                    "report only these region types, in this order (repeatable or comma-separated)")
        ->delimiter(',')
        ->allow_extra_args(false);
    cmd->add_option("-g,--genome", job->genome,
                    "sequence lengths for true negatives and accuracy: NAME<tab>LENGTH lines "
                    "(chrom sizes, .fai) or a FASTA file");
    cmd->add_option("--json", job->json, "also write the numbers as JSON");
    cmd->add_option("-o,--output", job->output, "text table (- for stdout)")->capture_default_str();
    cmd->add_flag("-v,--verbose", *verbose, "more detail on stderr");
    cmd->add_flag("-q,--quiet", *quiet, "only errors and warnings on stderr");
    cmd->footer(
        "Intervals of one type that overlap or touch are merged first (and reported as merged);\n"
        "order within a file does not matter. Base level: tp, fp, fn, tn (with --genome),\n"
        "precision tp/(tp+fp), recall tp/(tp+fn), f1 2tp/(2tp+fp+fn), jaccard tp/(tp+fp+fn),\n"
        "accuracy (tp+tn)/genome. Interval level: truth_hit = fraction of truth intervals\n"
        "overlapped by a call, calls_hit = fraction of calls overlapping truth, _r50 = with an\n"
        "overlap of at least 50% of both intervals; pairs = truth/call pairs overlapping that "
        "much\n"
        "(after merging each interval has at most one such partner); median_start/end_offset =\n"
        "median |difference| of the pairs' starts and ends. NA = undefined (zero denominator).\n");

    cmd->callback([=, &ctx] {
        job->command_line = ctx.command_line;
        const LogLevel level = *quiet     ? LogLevel::quiet
                               : *verbose ? LogLevel::verbose
                                          : LogLevel::normal;
        ctx.action = [job, level] {
            run_compare(*job, Logger(level));
            return 0;
        };
    });
}

}  // namespace tidemark::cli
