// Merge: combines the outputs of the N shards of a scan (scan --shard I/N) into exactly what a
// single run with the same options writes.
#pragma once

#include <string>
#include <vector>

#include "tidemark/log.hpp"

namespace tidemark {

/// Inputs are one file (or prefix) per shard. Summaries and reports may be given in any order
/// (each names its shard); BED, GFF3 and chrom-sizes files and track prefixes must follow the
/// order of the summaries (or, without summaries, of the reports). Every shard 1..N must be
/// present.
///
/// What is merged exactly (byte for byte equal to a single run), also when records were split
/// between shards: plain and browser BED (plain or bgzip, with tabix index when --bgzip),
/// bedGraph tracks (plain or bgzip), bigWig tracks (the format the shards recorded; a shard that
/// decoded no record wrote none, and none is looked for), chrom-sizes
/// files, GFF3 (feature IDs renumbered through the run in input order), the summary, and the
/// report except its "resources" object: wall and CPU seconds are the sums over the shards, peak
/// memory the largest shard's, Mbp/s the bases over the summed wall time (throughput per
/// shard-second).
/// Not merged: bigWig tracks of a run with --posterior-digits above 6 when records were split
/// between shards (float32 values cannot always tell whether a single run would have joined two
/// runs across a seam; merge bedGraph tracks instead). The shards' seams files are not outputs of
/// the run and are not merged.
struct MergeOptions {
    std::vector<std::string> shard_summaries;  ///< scan --summary of every shard
    std::vector<std::string> shard_reports;    ///< scan --report of every shard
    std::vector<std::string> shard_beds;       ///< scan -o of every shard, in summary order
    std::vector<std::string> shard_tracks;  ///< scan --posteriors PREFIX of every shard, same order
    std::vector<std::string> shard_gff3;    ///< scan --gff3 of every shard, same order
    std::vector<std::string> shard_chrom_sizes;  ///< scan --chrom-sizes of every shard, same order
    std::string output;            ///< merged BED ("" = stdout when shard_beds are given)
    std::string summary_path;      ///< merged summary ("" = none)
    std::string report_path;       ///< merged report ("" = none)
    std::string gff3_path;         ///< merged GFF3 ("" = none)
    std::string chrom_sizes_path;  ///< merged chrom sizes ("" = none)
    std::string tracks_prefix;  ///< merged tracks PREFIX.REGION.bedgraph[.gz] or PREFIX.REGION.bw
    bool bgzip = false;         ///< bgzip + tabix the merged BED and bedGraph files
    std::string profile;  ///< records shared between shards: the run's profile ("" = as recorded)
};

/// Throws UsageError naming the conflict.
void validate(const MergeOptions& options);

/// Checks that the shards come from one run (same command without --shard, inputs, profile and
/// options; every shard present once; every record of the input once) and writes the merged
/// files, each only when the whole merge succeeds. Throws InputError naming file and line.
void run_merge(const MergeOptions& options, const Logger& log);

}  // namespace tidemark
