"""Oracle: the contig screen of fitted islands profiles (README, "Contig screen"), on a real draft
with real foreign contigs planted in it: the E. coli MG1655 draft of Debian's ragout-examples with
20 contigs of 5-50 kb from V. cholerae, Klebsiella, S. aureus and H. pylori (10 within 1 point of
the draft's GC), as scripts/island-panel.py builds it.

- The screen tidemark fit writes (centre, precision, limits) equals an independent numpy/scipy
  implementation of the documented rule over the same FASTA; each contig's distance and limit in
  the scan summary equal numpy's, and the listed contigs are the documented rule applied to the
  summary's own entries.
- Against the planted truth (the issue's acceptance): at least 17 of the 20 foreign contigs
  listed, at most 5 % of the native contigs >= 5 kb, no call on a native contig < 1 kb.
- The summary is byte-identical with 1 or 2 threads and over 3 shards merged, and the distributed
  fit carries the same screen."""

import os
import sys

import numpy as np
from scipy.stats import chi2

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

panel = tmtest.island_panel()

NUMPY = "numpy/scipy: an independent implementation of the README's contig screen (np.cov, np.linalg.inv, " \
        "np.median, scipy.stats.chi2)"
PLANTED = ("planted truth: real segments of other genera added as contigs to the real E. coli draft "
           "(scripts/island-panel.py); issue 21 acceptance")
MIN_KNOWN = 5000
LENGTHS = [5000, 10000, 20000, 50000, 100000]
LEVEL = 1e-6
DIM = 32

LUT = np.full(256, 4, np.int64)
for _i, _b in enumerate(b"ACGT"):
    LUT[_b] = _i
LUT[np.frombuffer(b"acgt", np.uint8)] = np.arange(4)


def rc3(k):
    x, y, z = k // 16, k // 4 % 4, k % 4
    return 16 * (3 - z) + 4 * (3 - y) + (3 - x)


CODES = np.arange(64)
KEPT = CODES[CODES < rc3(CODES)]


def tile_counts(seq, length):
    """Pooled trinucleotide counts (64 per stretch) and known bases of the stretches [a, a+length),
    a = 0, length, ...; length None: the whole sequence as one stretch."""
    x = LUT[np.frombuffer(seq.encode(), np.uint8)]
    n = len(x)
    L = n if length is None else length
    tiles = n // L if L > 0 else 0
    if tiles == 0:
        return np.zeros((0, 64)), np.zeros(0)
    x = x[:tiles * L]
    t = 16 * x[:-2] + 4 * x[1:-1] + x[2:]
    ok = (x[:-2] < 4) & (x[1:-1] < 4) & (x[2:] < 4)
    i = np.arange(len(t))
    ok &= (i % L) <= L - 3  # all three bases in one stretch
    fwd = np.bincount((i[ok] // L) * 64 + t[ok], minlength=tiles * 64).reshape(tiles, 64)
    pooled = fwd + fwd[:, rc3(CODES)]
    known = np.bincount(np.arange(len(x)) // L, weights=(x < 4), minlength=tiles)
    return pooled.astype(float), known


def signatures(counts):
    f = counts / np.maximum(counts.sum(1, keepdims=True), 1)
    left = f.reshape(-1, 16, 4).sum(2)[:, CODES // 4]
    right = f.reshape(-1, 4, 16).sum(1)[:, CODES % 16]
    middle = f.reshape(-1, 4, 4, 4).sum((1, 3))[:, CODES // 4 % 4]
    r = np.log(np.maximum(f, 1e-9) * middle / np.maximum(left * right, 1e-12))
    return r[:, KEPT]


def stretches(records, length):
    out = []
    for _, s in records:
        c, known = tile_counts(s, length)
        if len(c):
            out.append(signatures(c[2 * known >= length]))
    return np.concatenate(out) if out else np.zeros((0, DIM))


def oracle_screen(records):
    base = stretches(records, 5000)
    keep = np.ones(len(base), bool)
    q975, med = chi2.ppf(0.975, DIM), chi2.median(DIM)
    for _ in range(5):
        center = base[keep].mean(0)
        precision = np.linalg.inv(np.cov(base[keep].T))
        d = np.einsum("ij,jk,ik->i", base - center, precision, base - center)
        keep = d <= q975 * np.median(d) / med
    lengths, limits = [], []
    for L in LENGTHS:
        s = stretches(records, L)
        if len(s) < 10:
            continue
        d = np.einsum("ij,jk,ik->i", s - center, precision, s - center)
        lengths.append(L)
        limits.append(np.median(d) / med * chi2.isf(LEVEL, DIM))
    return center, precision, np.array(lengths), np.array(limits)


def body(checks, binary, work):
    cache = panel.Cache(os.path.join(os.path.dirname(binary), "island-panel-cache"))
    fasta, truth = panel.cached_draft(cache, "draft")
    records = tmtest.read_fasta(fasta)
    profile = os.path.join(work, "P.json")
    tmtest.run(binary, ["fit", fasta, "-p", "composition-shift", "-o", profile, "-q", "-t", "2"])
    screen = tmtest.read_json(profile)["contig_screen"]

    center, precision, lengths, limits = oracle_screen(records)
    got_p = np.array(screen["precision"])
    checks.at_most(float(np.abs(np.array(screen["center"]) - center).max()), 1e-9,
                   "fit: the screen's centre (robust mean of the 5-kb stretches' signatures)", NUMPY)
    checks.at_most(float(np.abs(got_p - precision).max() / np.abs(precision).max()), 1e-7,
                   "fit: the screen's precision (inverse robust covariance), relative to its largest entry",
                   NUMPY)
    got_lengths = [x["known_bases"] for x in screen["limits"]]
    got_limits = np.array([x["distance"] for x in screen["limits"]])
    checks.equal(got_lengths, lengths.tolist(), "fit: the lengths with at least 10 stretches", NUMPY)
    checks.at_most(float(np.abs(got_limits / limits - 1).max()), 1e-9,
                   "fit: each length's limit (median distance scaled to the chi-square quantile)", NUMPY)

    two = os.path.join(work, "two")
    # The workflow's distributed fit: seeded once on the whole genome, then E-steps per shard and
    # an M-step from their statistics; the screen does not depend on the EM.
    tmtest.run_in(binary, os.path.join(work, "dist"), ["fit", fasta, "-p", "composition-shift", "--max-iter", "0",
                                                       "-o", "start.json", "-q"])
    for i in (1, 2):
        tmtest.run_in(binary, os.path.join(work, "dist"), ["fit", fasta, "-p", "start.json", "--emit-stats",
                                                           f"stats.{i}.json", "--shard", f"{i}/2", "-q"])
    tmtest.run_in(binary, os.path.join(work, "dist"), ["fit", "--from-stats", "stats.1.json", "stats.2.json",
                                                       "-p", "start.json", "-o", "P.json", "-q"])
    checks.equal(tmtest.read_json(os.path.join(work, "dist", "P.json")).get("contig_screen"), screen,
                 "the distributed fit (2 shards) carries the same screen as the one-machine fit",
                 "README: Contig screen (the screen does not depend on the EM)")
    bed, summ = os.path.join(two, "calls.bed"), os.path.join(two, "summary.json")
    tmtest.run_in(binary, two, ["scan", fasta, "-p", profile, "-o", "calls.bed", "--summary", "summary.json",
                                "-q", "-t", "2"])
    doc = tmtest.read_json(summ)
    entries = {c["name"]: c for c in doc["contigs"]}
    worst, screened, unscreened_ok = 0.0, 0, True
    for name, s in records:
        c = entries[name]
        counts, known = tile_counts(s, None)
        if known.sum() < MIN_KNOWN:
            unscreened_ok &= "composition_distance" not in c
            continue
        screened += 1
        d = signatures(counts)[0] - center
        distance = float(d @ precision @ d)
        limit = float(np.exp(np.interp(np.log(known.sum()), np.log(lengths), np.log(limits))))
        worst = max(worst, abs(c["composition_distance"] / distance - 1), abs(c["composition_limit"] / limit - 1))
    checks.at_most(worst, 1e-7, f"scan: every contig's composition distance and limit ({screened} contigs "
                   "with >= 5,000 known bases; limits interpolated log-log)", NUMPY)
    checks.check(unscreened_ok, "scan: contigs with fewer than 5,000 known bases carry no composition distance",
                 "README: Contig screen")
    listed = [c["name"] for c in doc["foreign_contigs"]["contigs"]]
    checks.equal(listed, tmtest.foreign_by_rule(doc, profile), "the list is the documented rule over the "
                 "per-contig entries", "README: Contig screen")

    foreign = [f["name"] for f in truth["foreign"]]
    native = truth["native"]
    big = [n for n, L in native.items() if L >= 5000]
    flagged = sum(n in listed for n in foreign)
    big_listed = sum(n in listed for n in big)
    checks.check(flagged >= 17, "at least 17 of the 20 planted foreign contigs are listed", PLANTED,
                 f"{flagged} of 20; missed {[n for n in foreign if n not in listed]}")
    checks.at_most(big_listed / len(big), 0.05, f"native contigs >= 5 kb listed ({big_listed} of {len(big)})",
                   PLANTED)
    called = {r[0] for r in tmtest.read_bed(bed)}
    small = [n for n, L in native.items() if L < 1000]
    checks.check(not called & set(small), f"no call on the {len(small)} native contigs < 1 kb", PLANTED)

    # Same bytes with one thread and over three shards merged.
    one = os.path.join(work, "one")
    tmtest.run_in(binary, one, ["scan", fasta, "-p", profile, "-o", "calls.bed", "--summary", "summary.json",
                                "-q", "-t", "1"])
    for i in (1, 2, 3):
        tmtest.run_in(binary, os.path.join(work, f"s{i}"),
                      ["scan", fasta, "-p", profile, "-o", "calls.bed", "--summary", "summary.json", "-q",
                       "--shard", f"{i}/3"])
    merged = os.path.join(work, "merged")
    tmtest.run_in(binary, merged, ["merge", "-q", "--shard-summaries"] + [f"../s{i}/summary.json" for i in (1, 2, 3)]
                  + ["--shard-beds"] + [f"../s{i}/calls.bed" for i in (1, 2, 3)]
                  + ["-o", "calls.bed", "--summary", "summary.json"])
    for folder, what in ((one, "one thread"), (merged, "three shards merged")):
        checks.check(all(tmtest.read_bytes(os.path.join(folder, f)) == tmtest.read_bytes(os.path.join(two, f))
                         for f in ("calls.bed", "summary.json")),
                     f"summary and BED with {what} equal the two-thread run's byte for byte",
                     "the run itself (determinism)")


if __name__ == "__main__":
    tmtest.main("contig screen", body)
