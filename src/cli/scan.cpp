// `tidemark scan`: options -> ScanOptions -> run_scan.
#include "commands.hpp"
#include "tidemark/scan.hpp"

namespace tidemark::cli {

void add_scan(CLI::App& app, Context& ctx) {
    auto opts = std::make_shared<ScanOptions>();
    auto decode = std::make_shared<std::string>("posterior");
    auto criteria = std::make_shared<std::string>("none");
    auto verbose = std::make_shared<bool>(false);
    auto quiet = std::make_shared<bool>(false);
    auto min_posterior = std::make_shared<double>(0);
    auto merge_gap = std::make_shared<int64_t>(0);
    auto min_length = std::make_shared<int64_t>(0);

    CLI::App* cmd = app.add_subcommand(
        "scan", "Decode FASTA sequences with a profile: per-base region posteriors and BED calls");
    cmd->add_option("fasta", opts->inputs, "FASTA files (plain, gzip, bgzip, xz, bzip2, zstd); - for stdin")
        ->required();
    cmd->add_option("-p,--profile", opts->profile, "built-in profile name or profile JSON file")
        ->capture_default_str();
    cmd->add_option("-o,--output", opts->output, "BED file of calls (- for stdout)")->capture_default_str();
    cmd->add_option("-r,--region", opts->regions,
                    "decode only this region: NAME or NAME:BEG-END, 1-based inclusive (repeatable; "
                    "uses the .fai index, built when missing)");
    cmd->add_option("--regions-bed", opts->regions_bed, "decode only the intervals of this BED file");
    cmd->add_option("--decode", *decode, "posterior (exact per-base posteriors) or viterbi (best path)")
        ->check(CLI::IsMember({"posterior", "viterbi"}))
        ->capture_default_str();
    auto* mp = cmd->add_option("--min-posterior", *min_posterior,
                               "call bases with P(region) >= this [profile default, 0.5 for cpg-island]");
    auto* mg = cmd->add_option("--merge-gap", *merge_gap,
                               "merge runs separated by fewer bases than this [profile default]");
    auto* ml = cmd->add_option("--min-length", *min_length,
                               "drop calls shorter than this [profile default, 200 for cpg-island]");
    cmd->add_option("--island-criteria", *criteria,
                    "post-filter calls: ggf1987 (>=200 bp, GC>0.5, o/e>0.6), tj2002 (>500 bp, "
                    "GC>=0.55, o/e>=0.65) or none")
        ->check(CLI::IsMember({"none", "ggf1987", "tj2002"}))
        ->capture_default_str();
    cmd->add_option("--posteriors", opts->posteriors_prefix,
                    "write per-base posteriors as bedGraph PREFIX.REGION.bedgraph");
    cmd->add_option("--posterior-digits", opts->posterior_digits, "decimals kept in bedGraph values (0-12)")
        ->capture_default_str();
    cmd->add_option("--summary", opts->summary_path, "write a JSON summary of the run");
    cmd->add_option("--block", opts->block_size, "decoder block size in bases (0 = automatic)")
        ->capture_default_str();
    cmd->add_flag("-v,--verbose", *verbose, "per-contig details and a summary table on stderr");
    cmd->add_flag("-q,--quiet", *quiet, "only errors and warnings on stderr");

    cmd->callback([=, &ctx] {
        if (mp->count()) opts->min_posterior = *min_posterior;
        if (mg->count()) opts->merge_gap = *merge_gap;
        if (ml->count()) opts->min_length = *min_length;
        opts->decode = *decode == "viterbi" ? DecodeMode::viterbi : DecodeMode::posterior;
        opts->criteria = parse_island_criteria(*criteria);
        opts->command_line = ctx.command_line;
        const LogLevel level = *quiet ? LogLevel::quiet : *verbose ? LogLevel::verbose : LogLevel::normal;
        ctx.action = [opts, level] {
            run_scan(*opts, Logger(level));
            return 0;
        };
    });
}

}  // namespace tidemark::cli
