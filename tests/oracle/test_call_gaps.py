"""Assembly gaps split calls, on real data: every built-in profile scans human GRCh37 chrX 1-70 Mb
(Debian smalt-examples) and no call may overlap a run of at least 100 unknown bases. The runs are
found by Python in the FASTA itself and intersected with the calls by bedtools (Debian bedtools),
not by tidemark. The summary's called_bases (known bases inside calls) and expected_fraction
(a share of the known bases) are checked against the same FASTA; the isochore figures of issue 22
(calls tile >= 95 % of the known bases, median call >= 300 kb) still hold."""

import os
import subprocess
import sys

import numpy as np

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

# Open dataset shipped by Debian's smalt-examples: human GRCh37 chrX, bases 1-70,000,000 (the
# record is named X; its first 60,000 bases are N, the centromere gap lies near 58.5-61 Mb).
CHRX = "/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz"
PROFILES = ["cpg-island", "cpg-island-2state", "gc-shift", "isochore"]
GAP = 100  # assembly_gap_min_length (sequence.hpp), as README states it
PYTHON = "N runs and base counts by Python in the FASTA"
BEDTOOLS = "bedtools intersect -u (Debian bedtools) of the calls with the N runs found by Python"
ISSUE = "acceptance figure of issue 22"


def gap_runs(seq):
    """[begin, end) of every run of at least GAP unknown bases (not A, C, G, T in either case)."""
    mask = tmtest.long_unknown_runs(seq, GAP)
    edges = np.flatnonzero(np.diff(np.concatenate(([0], mask.astype(np.int8), [0]))))
    return list(zip(edges[::2].tolist(), edges[1::2].tolist()))


def body(checks, tm, work):
    name, seq = tmtest.read_fasta(CHRX)[0]
    gaps = gap_runs(seq)
    gaps_bed = os.path.join(work, "gaps.bed")
    with open(gaps_bed, "w") as f:
        for b, e in gaps:
            f.write(f"{name}\t{b}\t{e}\n")
    a = np.frombuffer(seq.upper().encode("ascii"), dtype=np.uint8)
    known = np.concatenate([[0], np.cumsum(np.isin(a, np.frombuffer(b"ACGT", dtype=np.uint8)))])
    known_all = int(known[-1])
    print(f"# chrX 1-70 Mb: {len(gaps)} runs of >= {GAP} N, {known_all} known bases", flush=True)
    checks.check(len(gaps) >= 2, "chrX 1-70 Mb holds assembly gaps (the test exercises them)", PYTHON,
                 f"{len(gaps)} runs")
    for profile in PROFILES:
        d = os.path.join(work, profile)
        scanned = profile
        if profile == "gc-shift":  # a template: scanned after fit seeds its classes from chrX
            tmtest.run_in(tm, d, ["fit", "-q", "-p", profile, CHRX, "--max-iter", "0", "-o", "start.json"])
            scanned = os.path.join(d, "start.json")
        tmtest.run_in(tm, d, ["scan", "-q", "-p", scanned, CHRX, "-o", "calls.bed", "--summary", "summary.json"])
        bed = os.path.join(d, "calls.bed")
        calls = [(int(r[1]), int(r[2]), r[3]) for r in tmtest.read_bed(bed)]
        hit = subprocess.run(["bedtools", "intersect", "-u", "-a", bed, "-b", gaps_bed], capture_output=True,
                             text=True, check=True).stdout
        hit = [l for l in hit.splitlines() if l and not l.startswith("#")]
        checks.equal(len(hit), 0, f"{profile}: no call of {len(calls)} overlaps a run of >= {GAP} N", BEDTOOLS)
        summary = tmtest.read_json(os.path.join(d, "summary.json"))["genome"]
        for region, x in summary["regions"].items():
            if not x["reported"]:
                continue
            inside = sum(int(known[e] - known[b]) for b, e, r in calls if r == region)
            checks.equal(x["called_bases"], inside, f"{profile}: {region} called_bases = known bases inside calls",
                         PYTHON)
            checks.at_most(abs(x["expected_fraction"] - x["expected_bases"] / known_all), 1e-12,
                           f"{profile}: {region} expected_fraction is a share of the known bases", PYTHON)
        if profile == "isochore":
            called = sum(int(known[e] - known[b]) for b, e, _ in calls)
            checks.check(called >= 0.95 * known_all, "isochore calls tile >= 95 % of the known bases", ISSUE,
                         f"{100 * called / known_all:.2f} %")
            median = float(np.median([e - b for b, e, _ in calls]))
            checks.check(median >= 300_000, "isochore median call >= 300 kb", ISSUE, f"{median / 1000:.0f} kb")


if __name__ == "__main__":
    tmtest.main("assembly gaps split calls on human chrX", body)
