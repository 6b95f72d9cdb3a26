"""Oracle: call ends at base resolution for signature models (calling.refine_ends in
composition-shift). Real segments of another genus with the host's G+C inserted into a real host
genome (scripts/gc-matched-chimera.py: E. coli K-12 MG1655 with 8 segments of 20-50 kb within 1
point of its G+C; here from V. cholerae N16961, not the O395 segments the template's settings and
the stretches' reach were chosen on). The documented recipe (fit composition-shift to the
chimera, scan) must place the call ends within 1 kb of the inserts' ends (median), closer than
on the window grid, without lowering the inserts' coverage. The truth is where the segments were
inserted, fixed before anything runs."""

import importlib.util
import json
import os
import sys
from pathlib import Path

import numpy as np

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

SCRIPT = Path(__file__).resolve().parents[2] / "scripts" / "gc-matched-chimera.py"
# Debian ragout-examples: V. cholerae O1 biovar El Tor N16961 (the panel's vc_n16961).
DONOR = Path("/usr/share/doc/ragout/examples/V.Cholerae/references/O1_biovar.fasta.gz")

TRUTH = "the inserted segments' coordinates in the chimera (set before any run)"
ISSUE = "acceptance bound of issue 21 (boundaries finer than the window grid: median error <= 1 kb)"


def build_chimera(work):
    """The script's chimera with N16961 as the donor; returns the inserts as (begin, end)."""
    spec = importlib.util.spec_from_file_location("gc_matched_chimera", SCRIPT)
    chimera = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(chimera)
    chimera.DONOR = DONOR
    _, truth, _ = chimera.build(Path(work))
    return [(b, e) for b, e, _ in truth]


def coverage(calls, inserts):
    return np.array([sum(max(0, min(ce, e) - max(cb, b)) for cb, ce in calls) / (e - b) for b, e in inserts])


def scan(binary, work, profile, out, extra=()):
    tmtest.run_in(binary, work, ["scan", "chimera.fa", "-p", profile, "-o", out, "-q", *extra])
    return [(int(r[1]), int(r[2])) for r in tmtest.read_bed(os.path.join(work, out))]


def check_evidence(checks, work):
    """gc_fraction and signature_distance of every GFF3 feature against numpy over the FASTA."""
    seq = tmtest.read_fasta(os.path.join(work, "chimera.fa"))[0][1]
    genome = tmtest.delta_star(seq)
    worst_gc = worst_delta = 0.0
    count = 0
    with open(os.path.join(work, "refined.gff3")) as f:
        for line in f:
            if line.startswith("#"):
                continue
            cols = line.rstrip("\n").split("\t")
            attrs = dict(kv.split("=", 1) for kv in cols[8].split(";"))
            part = seq[int(cols[3]) - 1:int(cols[4])]
            gc = sum(part.count(b) for b in "GC") / sum(part.count(b) for b in "ACGT")
            delta = np.abs(tmtest.delta_star(part) - genome).mean()
            worst_gc = max(worst_gc, abs(float(attrs["gc_fraction"]) - gc))
            worst_delta = max(worst_delta, abs(float(attrs["signature_distance"]) - delta))
            count += 1
    checks.check(count > 0, "GFF3 features to check", "the refined scan")
    checks.at_most(worst_gc, 5e-5 + 1e-12, f"GFF3 gc_fraction of {count} calls (4 decimals)", "numpy over the FASTA")
    checks.at_most(worst_delta, 5e-5 + 1e-12, f"GFF3 signature_distance of {count} calls: delta* from the record, "
                   "both strands (4 decimals)", "numpy over the FASTA (Karlin & Burge 1995, delta*)")


def chain_gc(mean):
    """G+C of the stationary composition of an order-(k-1) chain (4^(k-1) context rows, the
    context's last base in its lowest two bits), in numpy."""
    rows = np.array(mean)
    n = len(rows)
    step = np.zeros((n, n))
    for c in range(n):
        for b in range(4):
            step[c, (c * 4 + b) % n] += rows[c, b]
    values, vectors = np.linalg.eig(step.T)
    pi = np.real(vectors[:, np.argmin(np.abs(values - 1))])
    pi /= pi.sum()
    last = np.array([pi[[c for c in range(n) if c % 4 == b]].sum() for b in range(4)])
    return last[1] + last[2]


def check_descriptions(checks, fitted):
    """A region of several states states each one's fitted G+C and concentration (issue 21)."""
    states = {s["name"]: s for s in fitted["states"]}
    for region in fitted["regions"]:
        members = [s for s in fitted["states"] if s["region"] == region["name"]]
        if len(members) < 2:
            continue
        text = region.get("description", "")
        for s in members:
            sig = s["signature"]
            want = (f"{s['name']}: G+C {chain_gc(sig['mean']):.3f}, {sig['k']}-mer signature concentration "
                    f"{np.median(sig['concentration']):.4g}")
            if "concentration_below" in sig:
                ref = states[sig["concentration_below"]]["signature"]["concentration"]
                want += f" ({sig['concentration_below']} {np.median(ref):.4g})"
            checks.check(want in text, f"fitted region {region['name']} describes its state {s['name']}",
                         "numpy over the fitted profile (stationary G+C of the mean chain, median "
                         "concentration)", f"want '{want}' in '{text}'")


def body(checks, binary, work):
    inserts = build_chimera(work)
    checks.equal(len(inserts), 8, "GC-matched segments inserted", "scripts/gc-matched-chimera.py")
    tmtest.run_in(binary, work, ["fit", "chimera.fa", "-p", "composition-shift", "-o", "P.json", "-t", "2", "-q"])
    fitted = tmtest.read_json(os.path.join(work, "P.json"))
    checks.equal(fitted["calling"].get("refine_ends"), True, "the fitted composition-shift profile refines call "
                 "ends", "data/profiles/composition-shift.json (sources: calling.refine_ends)")
    check_descriptions(checks, fitted)
    on_grid = json.loads(json.dumps(fitted))
    del on_grid["calling"]["refine_ends"]
    with open(os.path.join(work, "grid.json"), "w") as f:
        json.dump(on_grid, f)

    grid = scan(binary, work, "grid.json", "grid.bed")
    refined = scan(binary, work, "P.json", "refined.bed", ["--gff3", "refined.gff3"])
    checks.check(all(b % 5000 == 0 for b, _ in grid), "without refinement, call starts lie on the 5-kb window grid",
                 "README (window profiles)")
    before, after = tmtest.check_refined_ends(checks, grid, refined, inserts, 1000, ISSUE)
    checks.check(np.median(after) < np.median(before), "refined ends lie closer to the inserts' ends than the "
                 "window grid's (median)", TRUTH, f"{np.median(after):.0f} vs {np.median(before):.0f} bp")

    share_before, share_after = coverage(grid, inserts), coverage(refined, inserts)
    print("# insert coverage grid/refined: " + " ".join(f"{x:.2f}/{y:.2f}" for x, y in zip(share_before,
                                                                                          share_after)), flush=True)
    checks.check((share_after >= 0.5).sum() >= (share_before >= 0.5).sum(),
                 "refinement keeps every insert that was at least half covered", TRUTH,
                 f"{(share_after >= 0.5).sum()} vs {(share_before >= 0.5).sum()} of {len(inserts)}")

    check_evidence(checks, work)

    scan(binary, work, "P.json", "refined.t1.bed", ["-t", "1"])
    tmtest.check_same_calls(checks, os.path.join(work, "refined.t1.bed"), os.path.join(work, "refined.bed"),
                            "refined calls are the same with -t 1 and the default threads")


if __name__ == "__main__":
    tmtest.main("call ends at base resolution for a signature model on GC-matched inserts", body)
