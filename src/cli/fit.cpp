// `tidemark fit`: options -> FitJobOptions -> run_fit.
#include "commands.hpp"
#include "tidemark/scan.hpp"  // recorded_command_line
#include "tidemark/train.hpp"

namespace tidemark::cli {

void add_fit(CLI::App& app, Context& ctx) {
    auto opts = std::make_shared<FitJobOptions>();
    auto classes = std::make_shared<std::string>();
    auto freeze = std::make_shared<std::vector<std::string>>();
    auto verbose = std::make_shared<bool>(false);
    auto quiet = std::make_shared<bool>(false);
    auto shard = std::make_shared<std::string>();
    auto soft_masked = std::make_shared<std::string>("base");

    CLI::App* cmd = app.add_subcommand(
        "fit",
        "Learn a profile from sequences: Baum-Welch from a profile or a K-class template, or "
        "counting on labelled regions");
    cmd->add_option(
        "fasta", opts->inputs,
        "FASTA files, all records pooled (read once per iteration); none with --from-stats");
    cmd->add_option("-p,--profile", opts->profile,
                    "starting profile: built-in name or profile JSON file");
    cmd->add_option("-o,--output", opts->output, "fitted profile JSON (- for stdout)")
        ->capture_default_str();
    cmd->add_option(
           "-r,--region", opts->regions,
           "train only on this region: NAME or NAME:BEG-END, 1-based inclusive (repeatable)")
        ->allow_extra_args(false);  // -r A genome.fa: genome.fa is the input, not a second region
    cmd->add_option("--regions-bed", opts->regions_bed,
                    "train only on the intervals of this BED file");
    cmd->add_option("--soft-masked", *soft_masked,
                    "lowercase (soft-masked) bases: base (read as A, C, G, T) or unknown (like N: "
                    "they contribute "
                    "nothing)")
        ->check(CLI::IsMember({"base", "unknown"}))
        ->capture_default_str();
    cmd->add_option(
        "--classes", *classes,
        "start from a template of K composition classes seeded from the data; A..B fits each "
        "count (with --select)");
    cmd->add_option("--order", opts->order, "emission order of --classes templates (0-5)")
        ->capture_default_str();
    cmd->add_option("--select", opts->select, "choose the number of classes of --classes A..B: bic")
        ->check(CLI::IsMember({"bic"}));
    cmd->add_flag("--init-from-data", opts->init_from_data,
                  "reseed the starting profile's emissions from GC-ranked windows of the data");
    cmd->add_option(
           "--init-window", opts->seed.window,
           "bases per window when seeding from the data (also the templates' segment length)")
        ->capture_default_str();
    cmd->add_option(
        "--labels", opts->labels,
        "BED whose name column gives each interval's region: count instead of Baum-Welch");
    cmd->add_option("--default-region", opts->default_region,
                    "region of bases outside every label [the profile's only unreported region]");
    cmd->add_option(
           "--pseudocount", opts->fit.pseudocount,
           "Dirichlet pseudocount added to every free probability (0 = maximum likelihood)")
        ->capture_default_str();
    cmd->add_option("--max-iter", opts->fit.max_iter,
                    "parameter updates at most (0 = evaluate the start only)")
        ->capture_default_str();
    cmd->add_option("--tol", opts->fit.tol,
                    "stop when the relative log-likelihood change is below this")
        ->capture_default_str();
    cmd->add_option(
           "--restarts", opts->fit.restarts,
           "EM runs: the first from the start, the others from perturbed starts; keeps the best")
        ->capture_default_str();
    cmd->add_option("--seed", opts->fit.seed, "random seed of the restarts' perturbations")
        ->capture_default_str();
    cmd->add_option(
           "--freeze", *freeze,
           "keep fixed: initial, transitions, emissions, transitions:STATE or emissions:STATE "
           "(repeatable)")
        ->allow_extra_args(false);
    cmd->add_option("--name", opts->name,
                    "name of the fitted profile [start name + '-fit', or classesK-orderk]");
    cmd->add_option("--block", opts->fit.block_size, "decoder block size in bases (0 = automatic)")
        ->capture_default_str();
    cmd->add_option(
           "-t,--threads", opts->fit.threads,
           "E-step threads (0 = every core); the fitted profile is the same for any number")
        ->capture_default_str();
    const char* distributed = "Distributed training (one EM iteration over N machines)";
    cmd->add_option(
           "--emit-stats", opts->emit_stats,
           "run one E-step of -p PROFILE and write its expected counts (JSON) instead of fitting")
        ->group(distributed);
    cmd->add_option("--shard", *shard,
                    "with --emit-stats: count only share I of N of the records (as scan --shard)")
        ->group(distributed);
    cmd->add_option("--emit-seams", opts->emit_seams,
                    "with --shard, when records longer than one share are split between shards: "
                    "step 1 of an "
                    "E-step, write only the seams of this shard's segments (as scan --emit-seams)")
        ->group(distributed);
    cmd->add_option(
           "--seams", opts->seams,
           "with --emit-stats: the seams files of every shard (repeat the option for each file)")
        ->allow_extra_args(false)
        ->group(distributed);
    cmd->add_flag("--whole-contigs", opts->whole_contigs,
                  "with --shard: never split a record between shards")
        ->group(distributed);
    cmd->add_option(
           "--from-stats", opts->from_stats,
           "sum the counts of every shard's --emit-stats file and write the re-estimated profile "
           "(-p: the fit's starting profile, for the structure)")
        ->group(distributed);
    cmd->add_flag("-v,--verbose", *verbose, "more detail on stderr");
    cmd->add_flag("-q,--quiet", *quiet, "only errors and warnings on stderr");

    cmd->callback([=, &ctx] {
        opts->command_line = recorded_command_line(ctx.command_line);
        opts->soft_masked = parse_soft_masked(*soft_masked);
        const LogLevel level = *quiet     ? LogLevel::quiet
                               : *verbose ? LogLevel::verbose
                                          : LogLevel::normal;
        // Parsing that can throw tidemark errors runs in the action, where main maps them to exit
        // codes.
        ctx.action = [opts, classes, freeze, shard, level] {
            if (!shard->empty()) opts->shard = parse_shard(*shard);
            if (!classes->empty())
                parse_class_range(*classes, opts->classes_min, opts->classes_max);
            for (const auto& w : *freeze) parse_freeze(w, opts->fit.freeze);
            run_fit(*opts, Logger(level));
            return 0;
        };
    });
}

}  // namespace tidemark::cli
