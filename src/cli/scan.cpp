// `tidemark scan`: options -> ScanOptions -> run_scan.
#include "tidemark/scan.hpp"

#include "commands.hpp"

namespace tidemark::cli {

void add_scan(CLI::App& app, Context& ctx) {
    auto opts = std::make_shared<ScanOptions>();
    auto decode = std::make_shared<std::string>("posterior");
    auto criteria = std::make_shared<std::string>("none");
    auto bed_style = std::make_shared<std::string>("plain");
    auto track_format = std::make_shared<std::string>("bedgraph");
    auto verbose = std::make_shared<bool>(false);
    auto quiet = std::make_shared<bool>(false);
    auto no_progress = std::make_shared<bool>(false);
    auto min_posterior = std::make_shared<double>(0);
    auto merge_gap = std::make_shared<int64_t>(0);
    auto min_length = std::make_shared<int64_t>(0);
    auto shard = std::make_shared<std::string>();
    auto soft_masked = std::make_shared<std::string>("base");

    CLI::App* cmd = app.add_subcommand(
        "scan", "Decode FASTA sequences with a profile: per-base region posteriors and BED calls");
    cmd->add_option("fasta", opts->inputs,
                    "FASTA files (plain, gzip, bgzip, xz, bzip2, zstd); - for stdin")
        ->required();

    const char* input = "Input";
    cmd->add_option("-p,--profile", opts->profile, "built-in profile name or profile JSON file")
        ->capture_default_str()
        ->group(input);
    cmd->add_option(
           "-r,--region", opts->regions,
           "decode only this region: NAME or NAME:BEG-END, 1-based inclusive (repeatable; uses "
           "the .fai index, built when missing)")
        ->allow_extra_args(false)  // -r A genome.fa: genome.fa is the input, not a second region
        ->group(input);
    cmd->add_option("--regions-bed", opts->regions_bed,
                    "decode only the intervals of this BED file")
        ->group(input);
    cmd->add_option("--soft-masked", *soft_masked,
                    "lowercase (soft-masked) bases: base (read as A, C, G, T) or unknown (like N; "
                    "counted as masked "
                    "in the summary)")
        ->check(CLI::IsMember({"base", "unknown"}))
        ->capture_default_str()
        ->group(input);
    cmd->add_option(
           "--shard", *shard,
           "decode only share I of N (1-based) of the records, balanced by length; combine the N "
           "outputs with 'tidemark merge'")
        ->group(input);
    cmd->add_option("--emit-seams", opts->emit_seams,
                    "with --shard, when records longer than one share are split between shards: "
                    "step 1, write "
                    "only the seams of this shard's segments to FILE")
        ->group(input);
    cmd->add_option(
           "--seams", opts->seams,
           "with --shard: step 2, the seams files of every shard (repeat the option for each file)")
        ->allow_extra_args(false)
        ->group(input);
    cmd->add_flag("--whole-contigs", opts->whole_contigs,
                  "with --shard: never split a record between shards (one step, less balanced)")
        ->group(input);

    const char* decoding = "Decoding and calling";
    cmd->add_option("--decode", *decode,
                    "posterior (exact per-base posteriors) or viterbi (best path)")
        ->check(CLI::IsMember({"posterior", "viterbi"}))
        ->capture_default_str()
        ->group(decoding);
    auto* mp =
        cmd->add_option("--min-posterior", *min_posterior,
                        "call bases with P(region) >= this [profile default; 0.5 for cpg-island]")
            ->group(decoding);
    auto* mg =
        cmd->add_option(
               "--merge-gap", *merge_gap,
               "merge runs separated by fewer bases than this [profile default; 50 for cpg-island]")
            ->group(decoding);
    auto* ml = cmd->add_option("--min-length", *min_length,
                               "drop calls shorter than this [profile default; 200 for cpg-island]")
                   ->group(decoding);
    cmd->add_option(
           "--core-posterior", opts->high_posterior,
           "a call's core (browser BED thickStart/thickEnd) spans its bases with P(region) >= this")
        ->capture_default_str()
        ->group(decoding);
    cmd->add_option(
           "--island-criteria", *criteria,
           "post-filter calls: ggf1987 (>=200 bp, GC>0.5, o/e>0.6), tj2002 (>500 bp, GC>=0.55, "
           "o/e>=0.65) or none")
        ->check(CLI::IsMember({"none", "ggf1987", "tj2002"}))
        ->capture_default_str()
        ->group(decoding);
    cmd->add_option("--block", opts->block_size, "decoder block size in bases (0 = automatic)")
        ->capture_default_str()
        ->group(decoding);
    cmd->add_option("-t,--threads", opts->threads,
                    "decoding threads (0 = every core); every output is the same for any number")
        ->capture_default_str()
        ->group(decoding);

    const char* output = "Output";
    cmd->add_option("-o,--output", opts->output, "calls as BED (- for stdout)")
        ->capture_default_str()
        ->group(output);
    cmd->add_option(
           "--bed-style", *bed_style,
           "plain (BED6+4) or browser (BED9+4: thickStart/thickEnd = core, itemRgb, track line)")
        ->check(CLI::IsMember({"plain", "browser"}))
        ->capture_default_str()
        ->group(output);
    cmd->add_flag(
           "--bgzip", opts->bgzip,
           "bgzip-compress BED and bedGraph outputs and write tabix indexes (.tbi; .csi past 2^29)")
        ->group(output);
    cmd->add_option("--gff3", opts->gff3_path, "also write the calls as GFF3")->group(output);
    cmd->add_option("--chrom-sizes", opts->chrom_sizes_path,
                    "write 'name<TAB>length' for every sequence decoded")
        ->group(output);
    cmd->add_option(
           "--posteriors", opts->tracks.prefix,
           "write per-base posteriors as PREFIX.REGION.bedgraph (or .bw), one per reported region")
        ->group(output);
    cmd->add_option("--track-format", *track_format, "posterior tracks as bedgraph or bigwig")
        ->check(CLI::IsMember({"bedgraph", "bigwig"}))
        ->capture_default_str()
        ->group(output);
    cmd->add_option("--posterior-digits", opts->tracks.digits,
                    "decimals kept in track values (0-12)")
        ->capture_default_str()
        ->group(output);
    cmd->add_option("--bin", opts->tracks.bin, "average posteriors over bins of this many bases")
        ->capture_default_str()
        ->group(output);
    cmd->add_flag("--track-line", opts->tracks.track_line,
                  "start bedGraph tracks with a browser track line")
        ->group(output);
    cmd->add_option("--summary", opts->summary_path, "JSON summary (deterministic)")->group(output);
    cmd->add_option("--report", opts->report_path,
                    "JSON run report: summary, call statistics, time and memory")
        ->group(output);
    cmd->add_option(
           "--html", opts->html_path,
           "self-contained HTML report: tables, calls along the sequences, histograms, top calls")
        ->group(output);

    const char* talk = "Messages";
    cmd->add_flag("-v,--verbose", *verbose, "per-contig details and a summary table on stderr")
        ->group(talk);
    cmd->add_flag("-q,--quiet", *quiet, "only errors and warnings on stderr")->group(talk);
    cmd->add_flag("--no-progress", *no_progress, "no progress line even when stderr is a terminal")
        ->group(talk);

    cmd->callback([=, &ctx] {
        if (mp->count()) opts->min_posterior = *min_posterior;
        if (mg->count()) opts->merge_gap = *merge_gap;
        if (ml->count()) opts->min_length = *min_length;
        opts->decode = *decode == "viterbi" ? DecodeMode::viterbi : DecodeMode::posterior;
        opts->criteria = parse_island_criteria(*criteria);
        opts->soft_masked = parse_soft_masked(*soft_masked);
        opts->bed_style = *bed_style == "browser" ? BedStyle::browser : BedStyle::plain;
        opts->tracks.format =
            *track_format == "bigwig" ? TrackFormat::bigwig : TrackFormat::bedgraph;
        // Every shard records the single-run command, so merged outputs equal a single run's.
        opts->command_line = recorded_command_line(ctx.command_line);
        const LogLevel level = *quiet     ? LogLevel::quiet
                               : *verbose ? LogLevel::verbose
                                          : LogLevel::normal;
        opts->progress = !*quiet && !*no_progress && ProgressMeter::stderr_is_terminal();
        ctx.action = [opts, shard, level] {
            if (!shard->empty()) opts->shard = parse_shard(*shard);
            run_scan(*opts, Logger(level));
            return 0;
        };
    });
}

}  // namespace tidemark::cli
