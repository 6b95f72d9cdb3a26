"""scripts/workflow/Snakefile run locally (snakemake --cores 2) on the demo genome with 3 shards:
the gathered BED, tracks and summary equal a single run byte for byte, the report apart from its
resources, and the distributed EM loop equals single-process fit within 1e-9."""

import os
import shutil
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "oracle"))
import tmtest  # noqa: E402

SOURCE = os.path.normpath(os.path.join(HERE, "..", ".."))
SNAKEFILE = os.path.join(SOURCE, "scripts", "workflow", "Snakefile")
DEMO = os.path.join(SOURCE, "data", "demo", "demo.fa.gz")
SINGLE = "single run of the same tidemark command (merged shards must equal it byte for byte)"
FIT = "single-process fit -p cpg-island --max-iter 2 --tol 0"
ITERATIONS = 2




def body(checks, binary, work):
    snakemake = shutil.which("snakemake")
    if not checks.check(snakemake is not None, "snakemake is installed", "scripts/install-deps.sh (Debian snakemake)"):
        return
    out = os.path.join(work, "out")
    cmd = [snakemake, "-s", SNAKEFILE, "--cores", "2", "--directory", work, "-q", "--config",
           f"tidemark={binary}", f"genome={DEMO}", f"outdir={out}", "shards=3", "posteriors=true",
           f"fit_iterations={ITERATIONS}", "fit_start=cpg-island",
           # 64 Ki-base segments: the 150 kb demo record is longer than a share and is split.
           "scan_options=--block 4096", "fit_estep_options=--block 4096"]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if not checks.check(proc.returncode == 0, "snakemake --cores 2 runs the workflow", "Snakemake exit status",
                        proc.stderr[-2000:] if proc.returncode else ""):
        return

    single = os.path.join(work, "single")
    os.makedirs(single)
    # The same words as every shard's command apart from --shard (the workflow's threads default is 1).
    tmtest.run(binary, ["scan", DEMO, "-p", "cpg-island", "-t", "1", "-o", "calls.bed", "--summary", "summary.json",
                        "--report", "report.json", "--posteriors", "post", "-q", "--block", "4096"], cwd=single)
    for ours, theirs in (("calls.bed", "calls.bed"), ("summary.json", "summary.json"),
                         ("tracks/posteriors.cpg_island.bedgraph", "post.cpg_island.bedgraph")):
        checks.check(tmtest.read_bytes(os.path.join(out, ours)) == tmtest.read_bytes(os.path.join(single, theirs)),
                     f"gathered {ours} equals the single run's", SINGLE)
    a = tmtest.read_json(os.path.join(single, "report.json"))
    b = tmtest.read_json(os.path.join(out, "report.json"))
    a.pop("resources")
    b.pop("resources")
    checks.check(a == b, "gathered report equals the single run's apart from resources", SINGLE)
    shards = [tmtest.read_json(os.path.join(out, "shards", str(i), "summary.json")) for i in (1, 2, 3)]
    whole = [c["name"] for s in shards for c in s["shard"]["contigs"]]
    shared = {r["record"]["name"] for s in shards for r in s["shard"]["shared"]}
    demo = tmtest.read_fasta(DEMO)
    longest = max(demo, key=lambda r: len(r[1]))[0]
    checks.equal(sorted(shared), [longest], "the record longer than a share is split between shards",
                 "share = ceil(genome length / 3) (shard.hpp rule); Python reading of the FASTA")
    checks.equal(sorted(whole + sorted(shared)), sorted(n for n, _ in demo),
                 "the 3 shards decode every record, whole or in pieces, once", "Python reading of the FASTA")

    ref = os.path.join(work, "single-fit.json")
    tmtest.run(binary, ["fit", DEMO, "-p", "cpg-island", "--max-iter", str(ITERATIONS), "--tol", "0", "-o", ref, "-q"])
    diff = tmtest.profile_difference(tmtest.read_json(ref), tmtest.read_json(os.path.join(out, "fitted-profile.json")))
    checks.at_most(diff, 1e-9, f"{ITERATIONS} distributed EM iterations over 3 shards equal single-process fit", FIT)


if __name__ == "__main__":
    tmtest.main("Snakemake workflow: scatter/gather scan and distributed EM", body)
