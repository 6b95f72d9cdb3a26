#!/usr/bin/python3
"""Checks that tidemark and the benchmark baseline decode the same input to the same answer.

The baseline (scripts/bench/baseline.cpp) is an independent, textbook implementation, so
agreement here says that tidemark's speed did not cost correctness:
  - per-base P(region): tidemark's bedGraph (written with 12 decimals, so it carries at most
    5e-13 of rounding) against the baseline's 17-digit values, max |difference| <= tolerance;
    tidemark's tracks leave out runs of >= 100 N (assembly gaps: no data), so with --fasta the
    bases the track leaves out must be exactly those;
  - log-likelihood per contig: relative difference <= tolerance;
  - the called intervals (chrom, start, end) identical.
Exits 1 with the first disagreement, 0 with a one-line summary.
"""
import argparse
import gzip
import json
import re
import sys

import numpy as np


def read_bedgraph(path):
    """Per contig, a list of (start, end, value) runs."""
    runs = {}
    with open(path) as f:
        for line in f:
            if not line.strip() or line.startswith(("#", "track", "browser")):
                continue
            chrom, start, end, value = line.split("\t")[:4]
            runs.setdefault(chrom, []).append((int(start), int(end), float(value)))
    return runs


def read_baseline_posteriors(path, region):
    values = {}
    with open(path) as f:
        for line in f:
            contig, reg, pos, p = line.rstrip("\n").split("\t")
            if reg == region:
                values.setdefault(contig, []).append((int(pos), float(p)))
    out = {}
    for contig, pairs in values.items():
        arr = np.empty(len(pairs))
        for pos, p in pairs:
            arr[pos] = p
        out[contig] = arr
    return out


def read_fasta(path):
    """Per record of a FASTA file (plain or gzip), its sequence in upper case."""
    opener = gzip.open if path.endswith(".gz") else open
    seqs, name, parts = {}, None, []
    with opener(path, "rt") as f:
        for line in f:
            if line.startswith(">"):
                if name is not None:
                    seqs[name] = "".join(parts).upper()
                name, parts = line[1:].split()[0], []
            else:
                parts.append(line.strip())
    if name is not None:
        seqs[name] = "".join(parts).upper()
    return seqs


def long_gap_masks(path, min_run=100):
    """Per record of a FASTA file (plain or gzip), True at bases in runs of >= min_run N."""
    masks = {}
    for contig, seq in read_fasta(path).items():
        mask = np.zeros(len(seq), dtype=bool)
        for m in re.finditer(r"N{%d,}" % min_run, seq):
            mask[m.start():m.end()] = True
        masks[contig] = mask
    return masks


def read_intervals(path):
    rows = []
    with open(path) as f:
        for line in f:
            if line.startswith(("#", "track", "browser")) or not line.strip():
                continue
            chrom, start, end = line.split("\t")[:3]
            rows.append((chrom, int(start), int(end)))
    return rows


def baseline_log_likelihoods(path):
    out = {}
    with open(path) as f:
        for line in f:
            # "baseline: NAME<TAB>N bp<TAB>log-likelihood X"
            if line.startswith("baseline: ") and "log-likelihood" in line:
                fields = line[len("baseline: "):].rstrip("\n").split("\t")
                out[fields[0]] = float(fields[2].split()[-1])
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--region", default="cpg_island")
    ap.add_argument("--tidemark-bedgraph", required=True)
    ap.add_argument("--tidemark-summary", required=True)
    ap.add_argument("--tidemark-bed", required=True)
    ap.add_argument("--baseline-posteriors", required=True)
    ap.add_argument("--baseline-log", required=True)
    ap.add_argument("--baseline-bed", required=True)
    ap.add_argument("--tolerance", type=float, default=1e-9)
    ap.add_argument("--fasta", help="the input: its runs of >= 100 N are not in the track")
    a = ap.parse_args()

    base = read_baseline_posteriors(a.baseline_posteriors, a.region)
    runs = read_bedgraph(a.tidemark_bedgraph)
    if set(base) != set(runs):
        sys.exit(f"check: contigs differ: baseline {sorted(base)} tidemark {sorted(runs)}")
    gap_masks = long_gap_masks(a.fasta) if a.fasta else {}
    worst, bases = 0.0, 0
    for contig, expected in base.items():
        got = np.full(len(expected), np.nan)
        for start, end, value in runs[contig]:
            got[start:end] = value
        missing = np.isnan(got)
        gaps = gap_masks.get(contig, np.zeros(len(expected), dtype=bool))
        if not np.array_equal(missing, gaps):
            sys.exit(f"check: tidemark's track leaves out other bases of {contig} than its runs "
                     f"of >= 100 N ({int(missing.sum())} left out, {int(gaps.sum())} in such runs)")
        covered = ~missing
        if not covered.any():
            continue
        diff = float(np.max(np.abs(got[covered] - expected[covered])))
        worst = max(worst, diff)
        bases += int(covered.sum())
        if diff > a.tolerance:
            at = int(np.argmax(np.where(covered, np.abs(got - expected), -1.0)))
            sys.exit(f"check: {contig}:{at}: P({a.region}) tidemark {got[at]!r} baseline "
                     f"{expected[at]!r} (|diff| {diff:.3g} > {a.tolerance:g})")

    with open(a.tidemark_summary) as f:
        summary = json.load(f)
    ll_tm = {c["name"]: c["log_likelihood"] for c in summary["contigs"]}
    ll_bl = baseline_log_likelihoods(a.baseline_log)
    if set(ll_tm) != set(ll_bl):
        sys.exit(f"check: log-likelihood contigs differ: {sorted(ll_tm)} vs {sorted(ll_bl)}")
    worst_ll = 0.0
    for name, x in ll_tm.items():
        rel = abs(x - ll_bl[name]) / max(abs(ll_bl[name]), 1e-300)
        worst_ll = max(worst_ll, rel)
        if rel > a.tolerance:
            sys.exit(f"check: {name}: log-likelihood tidemark {x!r} baseline {ll_bl[name]!r} "
                     f"(relative {rel:.3g} > {a.tolerance:g})")

    calls_tm, calls_bl = read_intervals(a.tidemark_bed), read_intervals(a.baseline_bed)
    if calls_tm != calls_bl:
        only_tm = sorted(set(calls_tm) - set(calls_bl))[:3]
        only_bl = sorted(set(calls_bl) - set(calls_tm))[:3]
        sys.exit(f"check: calls differ ({len(calls_tm)} vs {len(calls_bl)}); only tidemark: "
                 f"{only_tm}; only baseline: {only_bl}")

    print(f"agree: {bases} bases, {len(ll_tm)} contigs, max |dP| {worst:.2g}, "
          f"max relative d(log-likelihood) {worst_ll:.2g}, {len(calls_tm)} identical calls")


if __name__ == "__main__":
    main()
