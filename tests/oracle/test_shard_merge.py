"""scan --shard I/N + merge against a single run of the same command (byte for byte), with the
records, lengths and composition checked against Python's own reading of the FASTA, and the
assignment against the documented longest-first rule re-implemented here."""

import gzip
import json
import os
import shutil
import subprocess

import numpy as np

import tmtest

SINGLE = "single run of the same command (merged shards must equal it byte for byte)"
PYTHON = "Python reading of the FASTA"
RULE = "longest-first rule re-implemented in Python (Graham 1969 LPT; ties by input order, lower shard)"


def synthetic_records(rng):
    """Contigs of varied lengths with CpG-rich stretches, N runs and soft-masked bases."""
    records = []
    for i, n in enumerate([52000, 130000, 9000, 31000, 76000, 1500, 64000]):
        p = rng.dirichlet([8, 6, 6, 8])
        seq = rng.choice(list("ACGT"), size=n, p=p)
        for start in rng.integers(0, max(1, n - 2000), size=max(1, n // 30000)):
            seq[start:start + 1200] = rng.choice(list("CG"), size=min(1200, n - start))
        if i % 3 == 0:
            seq[n // 2:n // 2 + 300] = "N"
        text = "".join(seq)
        if i == 1:
            text = text[:5000] + text[5000:8000].lower() + text[8000:]
        records.append((f"chr{i + 1}", text))
    return records








def without_resources(path):
    doc = tmtest.read_json(path)
    return {k: v for k, v in doc.items() if k != "resources"}, doc.get("resources", {})


def exit_code(binary, args, cwd):
    return subprocess.run([binary] + args, cwd=cwd, capture_output=True, text=True)


def scenario(checks, binary, work, name, fasta, n, scan_args, outputs, regions=None):
    """Runs the single scan and n shards (each in its own folder, same words) and merges."""
    base = os.path.join(work, name)
    tmtest.run_in(binary, os.path.join(base, "single"), ["scan", fasta] + scan_args)
    for i in range(1, n + 1):
        tmtest.run_in(binary, os.path.join(base, f"s{i}"), ["scan", fasta, "--shard", f"{i}/{n}"] + scan_args)
    # Summaries in reverse order: merge must sort by shard; BEDs and tracks follow the summaries.
    order = list(range(n, 0, -1))
    args = ["merge", "-q", "--shard-summaries"] + [f"../s{i}/summary.json" for i in order]
    args += ["--shard-reports"] + [f"../s{i}/report.json" for i in range(1, n + 1)]
    args += ["--shard-beds"] + [f"../s{i}/{outputs['bed']}" for i in order]
    args += ["-o", outputs["bed"], "--summary", "summary.json", "--report", "report.json"]
    if "tracks" in outputs:
        args += ["--shard-posteriors"] + [f"../s{i}/post" for i in order] + ["--posteriors", "post"]
    if "gff3" in outputs:
        args += ["--shard-gff3"] + [f"../s{i}/{outputs['gff3']}" for i in order] + ["--gff3", outputs["gff3"]]
    if outputs.get("bgzip"):
        args += ["--bgzip"]
    tmtest.run_in(binary, os.path.join(base, "merged"), args)
    single, merged = os.path.join(base, "single"), os.path.join(base, "merged")
    files = [outputs["bed"], "summary.json"] + outputs.get("tracks", []) + outputs.get("extra", [])
    files += [outputs["gff3"]] if "gff3" in outputs else []
    for f in files:
        checks.check(tmtest.read_bytes(os.path.join(single, f)) == tmtest.read_bytes(os.path.join(merged, f)),
                     f"{name}: merged {f} equals the single run's", SINGLE)
    a, _ = without_resources(os.path.join(single, "report.json"))
    b, res = without_resources(os.path.join(merged, "report.json"))
    checks.check(a == b, f"{name}: merged report equals the single run's apart from resources", SINGLE)
    walls = [tmtest.read_json(os.path.join(base, f"s{i}", "report.json"))["resources"]["wall_seconds"]
             for i in range(1, n + 1)]
    checks.check(abs(res["wall_seconds"] - sum(walls)) <= 1e-9 * max(1.0, sum(walls)),
                 f"{name}: merged wall time is the sum of the shards'", "documented merge rule, summed here")
    # Every record in exactly one shard, as the rule says.
    summaries = [tmtest.read_json(os.path.join(base, f"s{i}", "summary.json")) for i in range(1, n + 1)]
    owner = {}
    for i, s in enumerate(summaries):
        for c in s["contigs"]:
            owner.setdefault(c["input_index"], []).append(i)
    return summaries, owner


def body(checks, binary, work):
    rng = np.random.default_rng(20240607)
    records = synthetic_records(rng)
    plain = os.path.join(work, "genome.fa")
    tmtest.write_fasta(plain, records)
    gz = os.path.join(work, "genome.fa.gz")
    with open(plain, "rb") as src, gzip.open(gz, "wb") as dst:  # plain gzip: no index possible
        shutil.copyfileobj(src, dst)
    lengths = [len(s) for _, s in records]
    expected_shard = tmtest.longest_first(lengths, 3)

    # 1. Plain FASTA (the index is built by the first shard), BED, summary, report, tracks.
    out = {"bed": "calls.bed", "tracks": ["post.cpg_island.bedgraph"], "gff3": "calls.gff3"}
    summaries, owner = scenario(checks, binary, work, "plain", plain, 3,
                                ["-o", "calls.bed", "--summary", "summary.json", "--report", "report.json",
                                 "--posteriors", "post", "--gff3", "calls.gff3", "-q"], out)
    checks.equal(sorted(owner), list(range(len(records))), "plain: every record is decoded", PYTHON)
    checks.check(all(len(v) == 1 for v in owner.values()), "plain: no record is decoded twice", PYTHON)
    got = [owner[i][0] for i in range(len(records))]
    checks.equal(got, expected_shard, "plain: records go to the shards of the longest-first rule", RULE)
    merged = tmtest.read_json(os.path.join(work, "plain", "merged", "summary.json"))
    seq = "".join(s for _, s in records).upper()
    counts = {b: seq.count(b) for b in "ACGT"}
    checks.equal(merged["genome"]["length"], sum(lengths), "plain: genome length", PYTHON)
    checks.equal(merged["genome"]["gc_fraction"], (counts["C"] + counts["G"]) / sum(counts.values()),
                 "plain: genome GC fraction", PYTHON)
    checks.equal([c["name"] for c in merged["contigs"]], [n for n, _ in records], "plain: contigs in input order",
                 PYTHON)

    # 2. Plain gzip (lengths from one pass), browser BED, bgzip + tabix outputs, more shards.
    out = {"bed": "calls.bed.gz", "tracks": ["post.cpg_island.bedgraph.gz"], "bgzip": True,
           "extra": ["calls.bed.gz.tbi", "post.cpg_island.bedgraph.gz.tbi"]}
    scenario(checks, binary, work, "gzip", gz, 4,
             ["-o", "calls.bed.gz", "--summary", "summary.json", "--report", "report.json", "--posteriors", "post",
              "--bed-style", "browser", "--bgzip", "--track-line", "--min-length", "100", "-q"], out)
    checks.check(not os.path.exists(gz + ".fai"), "gzip: no index is written for plain gzip",
                 "htslib cannot index plain gzip")

    # 3. Regions of an indexed file, and more shards than regions.
    regs = ["chr2:1-60000", "chr2:60001-130000", "chr5", "chr3:101-9000"]
    reg_args = sum((["-r", r] for r in regs), [])
    summaries, owner = scenario(checks, binary, work, "regions", plain, 6,
                                ["-o", "calls.bed", "--summary", "summary.json", "--report", "report.json",
                                 "--gff3", "calls.gff3", "-q"] + reg_args, {"bed": "calls.bed", "gff3": "calls.gff3"})
    checks.equal(sorted(owner), list(range(len(regs))), "regions: every region is decoded once", "the 4 -r options")

    # 4. Failures name the problem and leave no output.
    base = os.path.join(work, "plain", "merged")
    r = exit_code(binary, ["merge", "--shard-summaries", "../s1/summary.json", "../s3/summary.json",
                           "--summary", "x.json"], base)
    checks.check(r.returncode == 1 and "missing shards: 2" in r.stderr and not os.path.exists(os.path.join(base, "x.json")),
                 "merge without shard 2 fails naming it", "merge contract", r.stderr.strip())
    r = exit_code(binary, ["merge", "--shard-summaries", "../s1/summary.json", "../s2/summary.json",
                           "../s3/summary.json", "--shard-beds", "../s2/calls.bed", "../s1/calls.bed",
                           "../s3/calls.bed", "-o", "y.bed"], base)
    checks.check(r.returncode == 1 and "belongs to no record" in r.stderr and not os.path.exists(os.path.join(base, "y.bed")),
                 "BED files in another order than the summaries are refused", "merge contract", r.stderr.strip())
    other = os.path.join(work, "other")
    tmtest.run_in(binary, other, ["scan", plain, "--shard", "2/3", "--min-length", "300", "--summary", "summary.json",
                           "-o", "calls.bed", "-q"])
    r = exit_code(binary, ["merge", "--shard-summaries", "../plain/s1/summary.json", "summary.json",
                           "../plain/s3/summary.json", "--summary", "z.json"], other)
    checks.check(r.returncode == 1 and "different runs" in r.stderr, "shards with different options are refused",
                 "merge contract", r.stderr.strip())
    proc = subprocess.run([binary, "scan", "-", "--shard", "1/2", "-o", "/dev/null"], input=">a\nACGT\n",
                          capture_output=True, text=True)
    checks.check(proc.returncode == 2 and "standard input" in proc.stderr, "--shard refuses standard input",
                 "documented usage error (exit 2)", proc.stderr.strip())
    proc = exit_code(binary, ["scan", plain, "--shard", "4/3", "-o", "/dev/null"], work)
    checks.check(proc.returncode == 2, "--shard 4/3 is a usage error", "documented usage error (exit 2)")


if __name__ == "__main__":
    tmtest.main("scan --shard and merge against a single run", body)
