"""tidemark merge of bigWig tracks and chrom-sizes files: the merged files must equal a single run of
the same scan command byte for byte (whole records, records split between shards, several
regions of one sequence); pyBigWig (Debian python3-pybigwig) and a reading of the bigWig
chromosome B+ tree by the format's layout check the merged bigWig against the single run's
bedGraph and the FASTA; failures name the file."""

import os
import struct
import subprocess

import numpy as np

import tmtest

SINGLE = "single run of the same command (merged shards must equal it byte for byte)"
BEDGRAPH = "single run's bedGraph of the same command, read by pyBigWig"
FASTA = "FASTA written by this test"
LAYOUT = "bigWig chromosome B+ tree read by its on-disk layout (UCSC bigWig format)"
CONTRACT = "documented error contract"
REGION = "cpg_island"


def genome(rng, lengths, segment):
    """AT-leaning background with CpG-rich stretches, some centred on segment boundaries (where
    one shard's piece may end and the next begin), and long plain stretches so that runs of one
    value cross those boundaries too."""
    records = []
    for i, n in enumerate(lengths):
        seq = rng.choice(list("ACGT"), size=n, p=[0.3, 0.2, 0.2, 0.3])
        centres = list(range(segment, n - 2000, 2 * segment)) + list(rng.integers(2000, max(2001, n - 2000), size=2))
        for c in centres:
            width = int(rng.integers(600, 2000))
            lo, hi = max(0, c - width // 2), min(n, c + width // 2)
            seq[lo:hi] = rng.choice(list("ACGT"), size=hi - lo, p=[0.1, 0.4, 0.4, 0.1])
        records.append((f"chr{i + 1}", "".join(seq)))
    return records






def chrom_tree(path):
    """(item count, [(name, id, length)]) from the bigWig header's chromosome B+ tree."""
    data = tmtest.read_bytes(path)
    offset, = struct.unpack_from("<Q", data, 8)
    _, _, key_size, _, count, _ = struct.unpack_from("<IIIIQQ", data, offset)
    items = []

    def node(at):
        leaf, _, n = struct.unpack_from("<BBH", data, at)
        at += 4
        for _ in range(n):
            key = data[at:at + key_size].rstrip(b"\0").decode()
            at += key_size
            if leaf:
                cid, length = struct.unpack_from("<II", data, at)
                items.append((key, cid, length))
            else:
                child, = struct.unpack_from("<Q", data, at)
                node(child)
            at += 8

    node(offset + 32)
    return count, items


def sequence_names(records, regions):
    """Sequences decoded, in input order, each once: what the bigWig list and chrom sizes hold."""
    if not regions:
        return [name for name, _ in records]
    names = []
    for r in regions:
        n = r.split(":")[0]
        if n not in names:
            names.append(n)
    return names


def scenario(checks, binary, work, name, fasta, records, n, scan_args, regions=(), split=False):
    """Single run, bedGraph run, N shards (two steps when records are split) and merge; returns
    the merged folder and the shards' "shard" objects."""
    import pyBigWig  # Debian python3-pybigwig; missing means this test fails (reported by tmtest)

    base = os.path.join(work, name)
    reg = sum((["-r", r] for r in regions), [])
    scan = scan_args + reg
    words = ["-o", "calls.bed", "--summary", "summary.json", "--posteriors", "post", "--track-format", "bigwig",
             "--chrom-sizes", "sizes.txt", "-q"] + scan
    tmtest.run_in(binary, os.path.join(base, "single"), ["scan", fasta] + words)
    tmtest.run_in(binary, os.path.join(base, "bedgraph"), ["scan", fasta, "-o", "/dev/null", "--posteriors", "post", "-q"]
           + scan)
    seams = []
    if split:
        for i in range(1, n + 1):
            tmtest.run_in(binary, os.path.join(base, "seams"),
                   ["scan", fasta, "--shard", f"{i}/{n}", "--emit-seams", f"{i}.json", "-q"] + scan)
        seams = sum((["--seams", f"../seams/{i}.json"] for i in range(1, n + 1)), [])
    for i in range(1, n + 1):  # every shard in its own folder, with the same output words
        tmtest.run_in(binary, os.path.join(base, f"s{i}"), ["scan", fasta, "--shard", f"{i}/{n}"] + seams + words)
    shards = [f"../s{i}" for i in range(1, n + 1)]
    tmtest.run_in(binary, os.path.join(base, "merged"),
           ["merge", "-q", "--shard-summaries"] + [f"{s}/summary.json" for s in shards]
           + ["--shard-beds"] + [f"{s}/calls.bed" for s in shards]
           + ["--shard-posteriors"] + [f"{s}/post" for s in shards]
           + ["--shard-chrom-sizes"] + [f"{s}/sizes.txt" for s in shards]
           + ["-o", "calls.bed", "--summary", "summary.json", "--posteriors", "post", "--chrom-sizes", "sizes.txt"])
    single, merged = os.path.join(base, "single"), os.path.join(base, "merged")
    for f in sorted(os.listdir(single)):
        checks.check(tmtest.read_bytes(os.path.join(single, f)) == tmtest.read_bytes(os.path.join(merged, f)),
                     f"{name}: merged {f} equals the single run's", SINGLE)

    lengths = dict((nm, len(s)) for nm, s in records)
    names = sequence_names(records, regions)
    want_list = [(nm, lengths[nm]) for nm in names]
    bw_path = os.path.join(merged, f"post.{REGION}.bw")
    with open(os.path.join(merged, "sizes.txt"), encoding="ascii") as f:
        sizes = [(c, int(v)) for c, v in (line.rstrip("\n").split("\t") for line in f)]
    checks.equal(sizes, want_list, f"{name}: merged chrom sizes list each decoded sequence once, in input order",
                 FASTA)
    count, items = chrom_tree(bw_path)
    checks.equal((count, sorted((k, ln) for k, _, ln in items)), (len(want_list), sorted(want_list)),
                 f"{name}: merged bigWig's chromosome tree holds each sequence once", LAYOUT)
    bw = pyBigWig.open(bw_path)
    checks.equal(list(bw.chroms().items()), want_list, f"{name}: merged bigWig sequence list (pyBigWig)", FASTA)
    bedgraph = tmtest.read_bedgraph_intervals(os.path.join(base, "bedgraph", f"post.{REGION}.bedgraph"))
    for chrom in names:
        got = bw.intervals(chrom) or []
        want = bedgraph.get(chrom, [])
        checks.check([(s, e) for s, e, _ in got] == [(s, e) for s, e, _ in want],
                     f"{name}: merged bigWig intervals of {chrom} equal the bedGraph's ({len(want)})", BEDGRAPH)
        # bigWig keeps float32: the bedGraph's 3-decimal value rounded to float32, nothing else.
        worst = max((abs(a[2] - b[2]) for a, b in zip(got, want)), default=0.0)
        exact = all(np.float32(b[2]) == np.float32(a[2]) for a, b in zip(got, want))
        checks.check(exact and worst <= 2.0 ** -24, f"{name}: merged bigWig values of {chrom} are the bedGraph's "
                     "3-decimal values in float32", BEDGRAPH, f"worst {worst:.3g}")
    bw.close()
    return merged, [tmtest.read_json(os.path.join(base, f"s{i}", "summary.json"))["shard"] for i in range(1, n + 1)]


def seams_crossed(checks, name, merged, shards):
    """Boundaries between two shards' pieces of a shared record that one merged interval spans:
    there the merge joined runs that the shards had cut."""
    import pyBigWig

    bounds = []
    for s, doc in enumerate(shards):
        for r in doc.get("shared", []):
            for d in r["done"]:
                bounds.append((r["record"]["name"], r["record"].get("offset", 0), d["segment"], s))
    cuts = []
    by_record = {}
    for chrom, off, seg, s in bounds:
        by_record.setdefault((chrom, off), {})[seg] = s
    bw = pyBigWig.open(os.path.join(merged, f"post.{REGION}.bw"))
    crossed = 0
    for (chrom, off), segs in by_record.items():
        for seg in sorted(segs):
            if seg - 1 in segs and segs[seg - 1] != segs[seg]:
                cuts.append((chrom, off, seg))
    for doc in shards:
        for r in doc.get("shared", []):
            for d in r["done"]:
                key = (r["record"]["name"], r["record"].get("offset", 0), d["segment"])
                if key in cuts:
                    at = r["record"].get("offset", 0) + d["begin"]
                    crossed += any(s < at < e for s, e, _ in bw.intervals(key[0], at - 1, at + 1) or [])
    bw.close()
    checks.check(len(cuts) >= 1, f"{name}: records are split between shards", "shard plan in the summaries",
                 f"{len(cuts)} boundaries between shards")
    checks.check(crossed >= 1, f"{name}: merged intervals run across boundaries between shards' pieces",
                 "shard plan in the summaries", f"{crossed} of {len(cuts)}")


def fails(checks, binary, cwd, args, code, fragments, what):
    r = subprocess.run([binary] + args, cwd=cwd, capture_output=True, text=True)
    ok = r.returncode == code and all(f in r.stderr for f in fragments)
    checks.check(ok, what, CONTRACT, f"exit {r.returncode}: {r.stderr.strip()[:300]}")


def merge_args(n, extra):
    shards = [f"../s{i}" for i in range(1, n + 1)]
    return (["merge", "-q", "--shard-summaries"] + [f"{s}/summary.json" for s in shards]
            + ["--shard-posteriors"] + [f"{s}/post" for s in shards] + extra)


def body(checks, binary, work):
    rng = np.random.default_rng(20261202)
    segment = 65536  # --block 4096: 16 blocks per segment (decode.hpp)

    # (a) Whole records only: several contigs on 3 shards, default blocks (no record splits).
    small = genome(rng, [120000, 80000, 60000, 45000, 30000, 9000], segment)
    fa_small = os.path.join(work, "small.fa")
    tmtest.write_fasta(fa_small, small)
    _, shards = scenario(checks, binary, work, "whole", fa_small, small, 3, [])
    checks.equal(sum(len(d.get("shared", [])) for d in shards), 0, "whole: no record is shared between shards",
                 "shard plan in the summaries")
    # More shards than records: the shard without records writes no bigWig (libBigWig cannot
    # write an empty one) and merge does not look for it.
    two = small[-2:]
    fa_two = os.path.join(work, "two.fa")
    tmtest.write_fasta(fa_two, two)
    _, shards = scenario(checks, binary, work, "empty-shard", fa_two, two, 3, [])
    empty = [i for i, d in enumerate(shards, 1) if not d["contigs"] and not d["shared"]]
    checks.check(len(empty) == 1 and not os.path.exists(os.path.join(work, "empty-shard", f"s{empty[0]}",
                                                                     f"post.{REGION}.bw")),
                 "empty-shard: the shard without records wrote no bigWig", "libBigWig cannot write an empty file")
    # Digits beyond float32's reach are fine without shared records: nothing is joined.
    scenario(checks, binary, work, "whole-digits8", fa_small, small, 3, ["--posterior-digits", "8"])

    # (b) Records split between shards: contigs of a few hundred kb, --block 4096, 4 shards.
    big = genome(rng, [430000, 310000, 50000, 20000], segment)
    fa_big = os.path.join(work, "big.fa")
    tmtest.write_fasta(fa_big, big)
    merged, shards = scenario(checks, binary, work, "split", fa_big, big, 4, ["--block", "4096"], split=True)
    seams_crossed(checks, "split", merged, shards)
    merged, shards = scenario(checks, binary, work, "split-binned", fa_big, big, 3,
                              ["--block", "4096", "--bin", "50", "-t", "2"], split=True)
    seams_crossed(checks, "split-binned", merged, shards)

    # (c) Several regions of one sequence plus another sequence (split, and on whole shards).
    regions = ["chr1:1-180000", "chr1:200001-430000", "chr2:1001-150000", "chr3"]
    merged, shards = scenario(checks, binary, work, "regions", fa_big, big, 4, ["--block", "4096"], regions,
                              split=True)
    seams_crossed(checks, "regions", merged, shards)
    scenario(checks, binary, work, "regions-whole", fa_big, big, 2, [], regions)
    # The single run of several regions of one sequence lists it once (it used to be listed per region).
    count, items = chrom_tree(os.path.join(work, "regions-whole", "single", f"post.{REGION}.bw"))
    checks.equal([k for k, _, _ in sorted(items, key=lambda t: t[1])], ["chr1", "chr2", "chr3"],
                 "single run of several regions of chr1 lists chr1 once in its bigWig", LAYOUT)

    # Failures name the problem and leave no output.
    split = os.path.join(work, "split", "merged")
    missing = os.path.join(work, "split", "s2", f"post.{REGION}.bw")
    os.rename(missing, missing + ".away")
    fails(checks, binary, split, merge_args(4, ["--posteriors", "out"]), 1, ["../s2/post.cpg_island.bw"],
          "a shard's missing bigWig is named")
    os.rename(missing + ".away", missing)
    cut = os.path.join(work, "split", "cut")
    os.makedirs(cut)
    with open(os.path.join(cut, f"post.{REGION}.bw"), "wb") as f:
        f.write(tmtest.read_bytes(missing)[:len(tmtest.read_bytes(missing)) // 2])
    fails(checks, binary, split,
          ["merge", "--shard-summaries"] + [f"../s{i}/summary.json" for i in range(1, 5)]
          + ["--shard-posteriors", "../s1/post", "../cut/post", "../s3/post", "../s4/post", "--posteriors", "out"], 1,
          ["../cut/post.cpg_island.bw"], "a truncated shard bigWig is named")
    fails(checks, binary, split,
          ["merge", "--shard-summaries"] + [f"../s{i}/summary.json" for i in range(1, 5)]
          + ["--shard-posteriors"] + [f"../s{i}/post" for i in (2, 1, 3, 4)] + ["--posteriors", "out"], 1,
          ["../s2/post.cpg_island.bw", "shard order"], "bigWig prefixes in another order than the summaries are refused")
    fails(checks, binary, split,
          ["merge", "--shard-summaries"] + [f"../s{i}/summary.json" for i in range(1, 5)]
          + ["--shard-chrom-sizes"] + [f"../s{i}/sizes.txt" for i in (1, 3, 2, 4)] + ["--chrom-sizes", "out.txt"],
          1, ["sizes.txt", "shard order"], "chrom-sizes files in another order than the summaries are refused")
    fails(checks, binary, split, merge_args(4, ["--posteriors", "out", "--chrom-sizes", "out.txt"]), 2,
          ["--shard-chrom-sizes"], "--chrom-sizes without the shards' files is a usage error")
    fails(checks, binary, split,
          ["merge", "--shard-summaries"] + [f"../s{i}/summary.json" for i in range(1, 5)]
          + ["--shard-chrom-sizes", "../s1/sizes.txt", "--chrom-sizes", "out.txt"], 2, ["one per shard"],
          "one chrom-sizes file for four shards is a usage error")

    # Digits > 6 with shared records: float32 cannot say whether a single run joined two runs.
    deep = genome(rng, [200000, 12000], segment)
    fa_deep = os.path.join(work, "deep.fa")
    tmtest.write_fasta(fa_deep, deep)
    base = os.path.join(work, "deep")
    scan = ["--block", "4096", "--posterior-digits", "8"]
    for i in (1, 2, 3):
        tmtest.run_in(binary, os.path.join(base, "seams"),
               ["scan", fa_deep, "--shard", f"{i}/3", "--emit-seams", f"{i}.json", "-q"] + scan)
    seams = sum((["--seams", f"../seams/{i}.json"] for i in (1, 2, 3)), [])
    for i in (1, 2, 3):
        tmtest.run_in(binary, os.path.join(base, f"s{i}"), ["scan", fa_deep, "--shard", f"{i}/3", "-o", "calls.bed",
                                                     "--summary", "summary.json", "--posteriors", "post",
                                                     "--track-format", "bigwig", "-q"] + seams + scan)
    deep_merged = os.path.join(base, "merged")
    os.makedirs(deep_merged)
    fails(checks, binary, deep_merged, merge_args(3, ["--posteriors", "post", "--summary", "summary.json"]), 1,
          ["--posterior-digits 8", "6 decimals", "summary.json"], "bigWig with 8 digits and shared records is refused")
    left = sorted(os.listdir(split)) + sorted(os.listdir(deep_merged))
    checks.check(not [f for f in left if f.startswith("out") or f.startswith(".")] and not os.listdir(deep_merged),
                 "failed merges leave no output file", CONTRACT, str(left))


if __name__ == "__main__":
    tmtest.main("merge of bigWig tracks and chrom sizes against a single run", body)
