// `tidemark merge`: options -> MergeOptions -> run_merge.
#include "tidemark/merge.hpp"

#include "commands.hpp"

namespace tidemark::cli {

void add_merge(CLI::App& app, Context& ctx) {
    auto opts = std::make_shared<MergeOptions>();
    auto quiet = std::make_shared<bool>(false);

    CLI::App* cmd = app.add_subcommand("merge",
                                       "Combine the outputs of the N shards of a scan (scan "
                                       "--shard I/N) into what one run writes");
    const char* input =
        "Shard outputs (one per shard; files and prefixes in the order of the summaries)";
    cmd->add_option("--shard-summaries", opts->shard_summaries, "every shard's scan --summary")
        ->group(input);
    cmd->add_option("--shard-reports", opts->shard_reports, "every shard's scan --report")
        ->group(input);
    cmd->add_option("--shard-beds", opts->shard_beds, "every shard's BED (scan -o; plain or bgzip)")
        ->group(input);
    cmd->add_option("--shard-gff3", opts->shard_gff3, "every shard's scan --gff3")->group(input);
    cmd->add_option(
           "--shard-posteriors", opts->shard_tracks,
           "every shard's scan --posteriors PREFIX (bedGraph or bigWig, as the shards wrote them)")
        ->group(input);
    cmd->add_option("--shard-chrom-sizes", opts->shard_chrom_sizes,
                    "every shard's scan --chrom-sizes")
        ->group(input);
    cmd->add_option(
           "-p,--profile", opts->profile,
           "the run's profile, when records were shared between shards and the recorded one "
           "cannot be found from here (checked against the recorded checksum)")
        ->group(input);
    const char* output = "Merged outputs";
    cmd->add_option("-o,--output", opts->output,
                    "merged BED (- for stdout) [stdout with --shard-beds]")
        ->group(output);
    cmd->add_option("--summary", opts->summary_path, "merged JSON summary")->group(output);
    cmd->add_option("--report", opts->report_path,
                    "merged JSON report (resources: summed wall and CPU time, largest peak memory)")
        ->group(output);
    cmd->add_option("--gff3", opts->gff3_path,
                    "merged GFF3 (feature IDs renumbered in input order)")
        ->group(output);
    cmd->add_option(
           "--posteriors", opts->tracks_prefix,
           "merged tracks PREFIX.REGION.bedgraph[.gz] or PREFIX.REGION.bw (the shards' format)")
        ->group(output);
    cmd->add_option("--chrom-sizes", opts->chrom_sizes_path, "merged chrom sizes (name<TAB>length)")
        ->group(output);
    cmd->add_flag(
           "--bgzip", opts->bgzip,
           "bgzip the merged BED and bedGraph files and write tabix indexes (.tbi; .csi past 2^29)")
        ->group(output);
    cmd->add_flag("-q,--quiet", *quiet, "only errors and warnings on stderr");

    cmd->callback([=, &ctx] {
        const LogLevel level = *quiet ? LogLevel::quiet : LogLevel::normal;
        ctx.action = [opts, level] {
            run_merge(*opts, Logger(level));
            return 0;
        };
    });
}

}  // namespace tidemark::cli
