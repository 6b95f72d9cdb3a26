"""Oracle: `tidemark scan` on the real lambda phage genome against Python counts, published values and pomegranate."""

import json
import math
import os
import sys

import numpy as np

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402
from test_pomegranate import POMEGRANATE, Tables, expanded_hmm  # noqa: E402

# Open dataset shipped by Debian's bowtie2-examples: phage lambda, RefSeq NC_001416.1, no N.
LAMBDA = "/usr/share/doc/bowtie2/examples/reference/lambda_virus.fa.gz"
# 48,502 bp: Sanger F, Coulson AR, Hong GF, Hill DF, Petersen GB (1982) Nucleotide sequence of
# bacteriophage lambda DNA, J. Mol. Biol. 162:729-773.
PUBLISHED_LENGTH = 48_502
# GC 49.86 %: NCBI RefSeq genome record NC_001416.1 (from memory), printed to two decimals.
PUBLISHED_GC = 0.4986
PUBLISHED_GC_TOL = 0.0001
PYTHON = "independent count in Python over the same FASTA"
GGF = "Gardiner-Garden & Frommer (1987), CpG islands in vertebrate genomes: o/e = N(CpG)*L/(N(C)*N(G))"


def counts(seq):
    """Base and CpG counts of a sequence of upper-case letters."""
    return {
        "A": seq.count("A"), "C": seq.count("C"), "G": seq.count("G"), "T": seq.count("T"),
        # str.count does not overlap matches, and "CG" cannot overlap itself, so this is every
        # position i with C at i and G at i+1 inside the string
        "CG": seq.count("CG"),
    }


def gc_fraction(n):
    known = n["A"] + n["C"] + n["G"] + n["T"]
    return (n["C"] + n["G"]) / known


def obs_exp(n):
    known = n["A"] + n["C"] + n["G"] + n["T"]
    return None if n["C"] * n["G"] == 0 else n["CG"] * known / (n["C"] * n["G"])


def reference_calls(p, min_posterior, merge_gap, min_length, core=0.95):
    """Calls by their documented definition (include/tidemark/call.hpp): maximal runs with
    P >= min_posterior, runs separated by fewer than merge_gap bases merged, then calls shorter
    than min_length dropped; mean taken over the whole call, merged gaps included, and the share
    of its bases at or above the core level, --core-posterior 0.95 (BED column
    confident_fraction, README)."""
    inside = p >= min_posterior
    edges = np.flatnonzero(np.diff(np.concatenate([[0], inside.astype(np.int8), [0]])))
    runs = list(zip(edges[0::2].tolist(), edges[1::2].tolist()))
    merged = []
    for b, e in runs:
        if merged and b - merged[-1][1] < merge_gap:
            merged[-1][1] = e
        else:
            merged.append([b, e])
    return [(b, e, float(p[b:e].mean()), float((p[b:e] >= core).mean())) for b, e in merged
            if e - b >= min_length]


def body(checks, binary, workdir):
    records = tmtest.read_fasta(LAMBDA)
    checks.equal(len(records), 1, "lambda FASTA holds one record", PYTHON)
    name, seq = records[0]
    n = counts(seq)
    known = n["A"] + n["C"] + n["G"] + n["T"]
    unknown = len(seq) - known

    summary_path = os.path.join(workdir, "lambda.json")
    bed_path = os.path.join(workdir, "lambda.bed")
    tmtest.run(binary, ["scan", LAMBDA, "--summary", summary_path, "-o", bed_path, "-q"])
    summary = tmtest.read_json(summary_path)
    checks.equal(len(summary["contigs"]), 1, "summary lists one contig", PYTHON)
    c = summary["contigs"][0]

    # --- composition of the whole genome
    checks.equal(c["name"], name, "contig name is the first word of the header", PYTHON)
    checks.equal(c["length"], len(seq), "length", PYTHON)
    checks.equal(c["length"], PUBLISHED_LENGTH, "length", "Sanger et al. (1982), J. Mol. Biol. 162:729")
    checks.equal(c["unknown_bases"], unknown, "unknown bases", PYTHON)
    checks.equal(c["unknown_bases"], 0, "unknown bases",
                 "RefSeq NC_001416.1 is a complete genome without gaps (common practice for RefSeq complete genomes)")
    # Exact float equality: both sides are one correctly rounded division of the same integers
    # (all far below 2^53), and the JSON number round-trips.
    checks.equal(c["gc_fraction"], gc_fraction(n), "gc_fraction", PYTHON)
    gc = c["gc_fraction"]
    checks.at_most(abs(gc - PUBLISHED_GC), PUBLISHED_GC_TOL, f"gc_fraction {gc:.6f} vs published 49.86 %",
                   "NCBI RefSeq NC_001416.1 (from memory)")
    checks.equal(c["cpg_obs_exp"], obs_exp(n), "cpg_obs_exp", GGF + "; " + PYTHON)
    g = summary["genome"]
    checks.equal((g["length"], g["unknown_bases"], g["gc_fraction"], g["cpg_obs_exp"]),
                 (len(seq), unknown, gc_fraction(n), obs_exp(n)),
                 "genome totals of a one-contig run", PYTHON)

    # --- the BED calls
    rows = tmtest.read_bed(bed_path)
    checks.check(len(rows) > 0, f"scan makes calls on lambda ({len(rows)})",
                 "test design: the per-call checks below need calls")
    checks.check(all(len(r) == 10 for r in rows), "every BED line has 10 columns",
                 "BED6+4 layout documented in include/tidemark/track.hpp")
    if not rows or any(len(r) != 10 for r in rows):
        return
    starts = [(int(r[1]), int(r[2])) for r in rows]
    checks.check(starts == sorted(starts), "calls sorted by start, end", "BED convention (common practice)")
    checks.check(all(r[0] == name for r in rows), "calls name the contig", PYTHON)
    checks.check(all(0 <= b < e <= len(seq) for b, e in starts),
                 "0 <= start < end <= contig length (0-based half-open)", "BED convention (common practice)")
    checks.check(all(starts[i][1] <= starts[i + 1][0] for i in range(len(starts) - 1)),
                 "calls of the one reported region do not overlap", "maximal runs are disjoint by definition")
    for r in rows:
        b, e = int(r[1]), int(r[2])
        where = f"call {b}-{e}"
        score, mean, above = int(r[4]), float(r[6]), float(r[7])
        checks.equal((r[3], r[5]), ("cpg_island", "."), f"{where}: name and strand",
                     "BED6+4 layout documented in include/tidemark/track.hpp")
        # score = round(1000 * mean) is made from the unrounded mean; the column keeps 4
        # decimals, so 1000 * column may be off by 0.05 before rounding.
        checks.check(abs(score - 1000 * mean) <= 0.5 + 0.05 + 1e-9, f"{where}: score {score} = round(1000*{mean})",
                     "hand computation: BED score definition in include/tidemark/track.hpp")
        checks.check(0 <= above <= 1, f"{where}: confident_fraction {above} in [0, 1]",
                     "a share of the call's bases (README)")
        sub = counts(seq[b:e])
        checks.equal(r[8], f"{gc_fraction(sub):.4f}", f"{where}: gc_fraction", PYTHON)
        oe = obs_exp(sub)
        checks.equal(r[9], "NA" if oe is None else f"{oe:.4f}", f"{where}: cpg_obs_exp", GGF + "; " + PYTHON)

    # --- the calls against the calling rule applied to pomegranate's posteriors
    profile = json.loads(tmtest.run(binary, ["profiles", "show", "cpg-island"]))
    t = Tables(profile)
    model, state_of = expanded_hmm(t)
    post = model.predict_proba(list(seq))
    p = post[:, np.array(t.region_of)[state_of] == t.regions.index("cpg_island")].sum(axis=1)
    calling = profile["calling"]
    # pomegranate's posteriors are within ~2e-8 of exact (see test_pomegranate.py); a base that
    # close to the threshold could fall either way, so require the margin before comparing.
    margin = float(np.min(np.abs(p - calling["min_posterior"])))
    if checks.check(margin > 1e-6, f"no base within 1e-6 of the threshold (closest {margin:.2g})",
                    "test design: the comparison below is decidable"):
        expected = reference_calls(p, calling["min_posterior"], calling["merge_gap"], calling["min_length"])
        checks.equal(starts, [(b, e) for b, e, _, _ in expected],
                     "call intervals = runs of P(cpg_island) >= min_posterior, merged, length-filtered",
                     POMEGRANATE + " posteriors with the rule in include/tidemark/call.hpp")
        for r, (b, e, mean, above) in zip(rows, expected):
            checks.at_most(abs(float(r[6]) - mean), 5e-5 + 1e-6, f"call {b}-{e}: mean_posterior vs oracle mean",
                           POMEGRANATE)
            checks.at_most(abs(float(r[7]) - above), 5e-5 + 1e-6,
                           f"call {b}-{e}: confident_fraction vs the oracle's share of bases >= 0.95", POMEGRANATE)
            if abs(1000 * mean - math.floor(1000 * mean) - 0.5) > 1e-4:
                checks.equal(int(r[4]), round(1000 * mean), f"call {b}-{e}: score from oracle mean", POMEGRANATE)


if __name__ == "__main__":
    tmtest.main("tidemark scan on lambda phage (NC_001416.1)", body)
