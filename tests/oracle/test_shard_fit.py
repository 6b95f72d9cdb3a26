"""Distributed training: fit --emit-stats over shards + fit --from-stats against single-process
Baum-Welch (fit --max-iter K --tol 0), numbers within 1e-9, and the counts' totals against
Python's own count of the bases."""

import os
import subprocess

import numpy as np

import tmtest

SINGLE = "single-process fit --max-iter K --tol 0 (same E-step and M-step in one process)"
PYTHON = "Python count of the FASTA's bases"



def records(rng):
    return records_of(rng, [40000, 90000, 7000, 25000, 60000])


def records_of(rng, lengths):
    out = []
    for i, n in enumerate(lengths):
        seq = rng.choice(list("ACGT"), size=n, p=rng.dirichlet([6, 5, 5, 6]))
        for start in rng.integers(0, n - 1500, size=2):
            seq[start:start + 900] = rng.choice(list("CGTA"), size=900, p=[0.4, 0.4, 0.1, 0.1])
        if i == 2:
            seq[100:400] = "N"
        out.append((f"ctg{i + 1}", "".join(seq)))
    return out


def distributed(binary, work, fasta, profile, n, iterations, tag, extra=(), split=False):
    """EM over n shards; with split, each E-step takes two steps (seams of every shard first)."""
    current = profile
    for k in range(1, iterations + 1):
        stats, seams = [], []
        if split:
            for i in range(1, n + 1):
                seams += ["--seams", os.path.join(work, f"{tag}.seams.{k}.{i}.json")]
                tmtest.run(binary, ["fit", fasta, "-p", current, "--emit-seams", seams[-1], "--shard", f"{i}/{n}",
                                    "-q"] + list(extra))
        for i in range(1, n + 1):
            path = os.path.join(work, f"{tag}.stats.{k}.{i}.json")
            tmtest.run(binary, ["fit", fasta, "-p", current, "--emit-stats", path, "--shard", f"{i}/{n}", "-q"] +
                       list(extra) + seams)
            stats.append(path)
        nxt = os.path.join(work, f"{tag}.profile.{k}.json")
        tmtest.run(binary, ["fit", "--from-stats"] + stats[::-1] + ["-p", profile, "-o", nxt, "-q"])
        current = nxt
    return current


# The per-base gc-shift of earlier releases (a test fixture): the built-in is now a window profile
# and a template, which fit seeds from the data before the first E-step.
GC_SHIFT_PER_BASE = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "data", "profiles",
                                 "gc-shift-per-base.json")


def tag_of(profile):
    return "gc-shift" if profile == GC_SHIFT_PER_BASE else profile


def body(checks, binary, work):
    rng = np.random.default_rng(77)
    recs = records(rng)
    fasta = os.path.join(work, "train.fa")
    tmtest.write_fasta(fasta, recs)
    known = sum(sum(s.count(b) for b in "ACGT") for _, s in recs)

    # cpg-island (per base), a per-base three-class profile, and the isochore window profile (whose
    # E-step statistics hold every window).
    for profile in ("cpg-island", GC_SHIFT_PER_BASE, "isochore"):
        for iterations, n in ((1, 3), (2, 4)):
            single = os.path.join(work, f"{tag_of(profile)}.single.{iterations}.json")
            tmtest.run(binary, ["fit", fasta, "-p", profile, "--max-iter", str(iterations), "--tol", "0",
                                "-o", single, "-q"])
            tag = f"{tag_of(profile)}.{iterations}.{n}"
            result = distributed(binary, work, fasta, profile, n, iterations, tag)
            a, b = tmtest.read_json(single), tmtest.read_json(result)
            diff = tmtest.profile_difference(a, b)
            checks.at_most(diff, 1e-9, f"{profile}: {iterations} EM iteration(s) over {n} shards equal the "
                                       f"single-process fit", SINGLE)
            checks.equal(b["name"], a["name"], f"{profile}: the distributed fit is named as fit names it", SINGLE)
            stats = [tmtest.read_json(os.path.join(work, f"{tag}.stats.1.{i}.json")) for i in range(1, n + 1)]
            checks.equal(sum(s["counts"]["known"] for s in stats), known,
                         f"{profile}: the shards' known bases add up to the FASTA's", PYTHON)
            names = sorted(r["name"] for s in stats for r in s["sequences"])
            checks.equal(names, sorted(n for n, _ in recs), f"{profile}: every record counted by exactly one shard",
                         PYTHON)

    # The shards' counts add up to the unsharded E-step's (summation order aside).
    whole = os.path.join(work, "whole.json")
    tmtest.run(binary, ["fit", fasta, "-p", "cpg-island", "--emit-stats", whole, "-q"])
    w = tmtest.read_json(whole)["counts"]
    parts = [tmtest.read_json(os.path.join(work, f"cpg-island.1.3.stats.1.{i}.json"))["counts"] for i in (1, 2, 3)]
    total = np.array(sum((np.array(p["transitions"]) for p in parts)))
    rel = np.max(np.abs(total - np.array(w["transitions"])) / np.maximum(1.0, np.abs(w["transitions"])))
    checks.at_most(rel, 1e-12, "transition counts of 3 shards add up to one E-step's", "sum of the shard files")
    checks.at_most(abs(sum(p["log_likelihood"] for p in parts) - w["log_likelihood"]) / abs(w["log_likelihood"]),
                   1e-12, "log-likelihoods of 3 shards add up to one E-step's",
                   "ln P(genome) = sum over contigs of ln P(contig)")

    # Records longer than one share are split between shards (--block 4096: 64 Ki-base segments),
    # two steps per E-step; the fit still equals the single-process one.
    long_recs = records_of(rng, [300000, 210000, 20000])
    long_fa = os.path.join(work, "long.fa")
    tmtest.write_fasta(long_fa, long_recs)
    long_known = sum(sum(s.count(b) for b in "ACGT") for _, s in long_recs)
    for profile in ("cpg-island", GC_SHIFT_PER_BASE):
        single = os.path.join(work, f"{tag_of(profile)}.long.single.json")
        tmtest.run(binary, ["fit", long_fa, "-p", profile, "--max-iter", "2", "--tol", "0", "-o", single, "-q"])
        tag = f"{tag_of(profile)}.long"
        result = distributed(binary, work, long_fa, profile, 3, 2, tag, ["--block", "4096"], split=True)
        checks.at_most(tmtest.profile_difference(tmtest.read_json(single), tmtest.read_json(result)), 1e-9,
                       f"{profile}: 2 EM iterations over 3 shards with split records equal the single-process fit",
                       SINGLE)
        stats = [tmtest.read_json(os.path.join(work, f"{tag}.stats.1.{i}.json"))["counts"] for i in (1, 2, 3)]
        checks.equal(sum(c["known"] for c in stats), long_known,
                     f"{profile}: split records: the shards' known bases add up to the FASTA's", PYTHON)
        checks.equal(sum(c["contigs"] for c in stats), len(long_recs),
                     f"{profile}: split records: each record is counted once", PYTHON)
        seams = [tmtest.read_json(os.path.join(work, f"{tag}.seams.1.{i}.json")) for i in (1, 2, 3)]
        shared = sorted({r["name"] for s in seams for r in s["records"]})
        checks.equal(shared, ["ctg1", "ctg2"], f"{profile}: the records longer than a share are split",
                     "share = ceil(530000 / 3) bases (shard.hpp rule)")
    r = subprocess.run([binary, "fit", long_fa, "-p", "cpg-island", "--block", "4096", "--shard", "1/3",
                        "--emit-stats", os.path.join(work, "z.json")], capture_output=True, text=True)
    checks.check(r.returncode == 2 and "--emit-seams" in r.stderr and not os.path.exists(os.path.join(work, "z.json")),
                 "an E-step of a shard with a shared record and no --seams is a usage error naming step 1",
                 "documented exit code 2", r.stderr.strip()[:160])

    # Failures.
    s = [os.path.join(work, f"cpg-island.1.3.stats.1.{i}.json") for i in (1, 3)]
    r = subprocess.run([binary, "fit", "--from-stats"] + s + ["-o", os.path.join(work, "x.json")],
                       capture_output=True, text=True)
    checks.check(r.returncode == 1 and "missing" in r.stderr and not os.path.exists(os.path.join(work, "x.json")),
                 "--from-stats without shard 2 fails", "fit contract", r.stderr.strip())
    mixed = [os.path.join(work, "cpg-island.1.3.stats.1.1.json"), os.path.join(work, "gc-shift.1.3.stats.1.2.json"),
             os.path.join(work, "cpg-island.1.3.stats.1.3.json")]
    r = subprocess.run([binary, "fit", "--from-stats"] + mixed + ["-o", os.path.join(work, "y.json")],
                       capture_output=True, text=True)
    checks.check(r.returncode == 1 and "not shards of one E-step" in r.stderr, "statistics of different profiles "
                 "are refused", "fit contract", r.stderr.strip())
    r = subprocess.run([binary, "fit", fasta, "-p", "cpg-island", "--shard", "1/2", "-o", "/dev/null"],
                       capture_output=True, text=True)
    checks.check(r.returncode == 2, "fit --shard without --emit-stats is a usage error", "documented exit code 2",
                 r.stderr.strip())


if __name__ == "__main__":
    tmtest.main("distributed fit against single-process Baum-Welch", body)
