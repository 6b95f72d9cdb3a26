"""`tidemark fit` on the command line: labelled training through a BED file against hand counts,
the --select table, the listing of built-ins, and failures with their documented exit codes
(README "Exit codes": 1 input, 2 usage) that leave no output file behind."""

import json
import os
import subprocess
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

HAND = "hand count (in the comment above the check)"
EXIT = "exit codes documented in src/cli/main.cpp (1 input, 2 usage)"

START = {
    "format": "tidemark-profile/1", "name": "lab",
    "regions": [{"name": "isl", "report": True}, {"name": "bg", "report": False}],
    "states": [{"name": "i", "region": "isl", "order": 0, "emissions": [[0.25, 0.25, 0.25, 0.25]]},
               {"name": "o", "region": "bg", "order": 0, "emissions": [[0.25, 0.25, 0.25, 0.25]]}],
    "initial": {"i": 0.5, "o": 0.5},
    "transitions": {"i": {"i": 0.9, "o": 0.1}, "o": {"o": 0.9, "i": 0.1}},
}


def run(binary, args):
    return subprocess.run([binary] + args, capture_output=True, text=True)


def body(checks, binary, work):
    fasta = os.path.join(work, "lab.fa")
    tmtest.write_fasta(fasta, [("c1", "AAGCGCTTAT"), ("c2", "GGCC")])
    start = os.path.join(work, "start.json")
    with open(start, "w", encoding="utf-8") as f:
        json.dump(START, f)
    bed = os.path.join(work, "labels.bed")
    with open(bed, "w", encoding="ascii") as f:
        f.write("# labelled islands\nc1\t2\t6\tisl\nc2\t0\t4\tisl\n")

    # c1 = A A | G C G C | T T A T, c2 = G G C C, islands as in labels.bed, the rest bg. By hand:
    #   initial: c1 starts in bg, c2 in isl -> 1 and 1 -> 1/2 each
    #   bg -> bg: 0-1, 6-7, 7-8, 8-9 = 4; bg -> isl: 1-2 = 1   -> 4/5, 1/5
    #   isl -> isl: 2-3, 3-4, 4-5 in c1 and 3 in c2 = 6; isl -> bg: 5-6 = 1 -> 6/7, 1/7
    #   isl emits G C G C G G C C: C 4/8, G 4/8; bg emits A A T T A T: A 3/6, T 3/6
    out = os.path.join(work, "lab.fit.json")
    tmtest.run(binary, ["fit", fasta, "-p", start, "--labels", bed, "--pseudocount", "0", "-q", "-o", out])
    p = tmtest.read_json(out)
    got = [p["initial"]["i"], p["initial"]["o"], p["transitions"]["o"]["o"], p["transitions"]["o"]["i"],
           p["transitions"]["i"]["i"], p["transitions"]["i"]["o"]] + p["states"][0]["emissions"][0] + \
        p["states"][1]["emissions"][0]
    want = [0.5, 0.5, 4 / 5, 1 / 5, 6 / 7, 1 / 7, 0, 0.5, 0.5, 0, 0.5, 0, 0, 0.5]
    checks.check(max(abs(a - b) for a, b in zip(got, want)) < 1e-12, "labelled maximum-likelihood estimates", HAND,
                 f"got {got}")
    checks.equal(p["provenance"]["method"], "labelled", "provenance names the method", "fit documentation")

    # With pseudocount 1 (added to every non-zero entry): bg -> (4+1, 1+1)/7, isl emits (1, 5, 5, 1)/12.
    tmtest.run(binary, ["fit", fasta, "-p", start, "--labels", bed, "-q", "-o", out])
    p = tmtest.read_json(out)
    got = [p["transitions"]["o"]["o"], p["states"][0]["emissions"][0][1]]
    checks.check(abs(got[0] - 5 / 7) < 1e-12 and abs(got[1] - 5 / 12) < 1e-12, "labelled estimates, pseudocount 1",
                 HAND, f"got {got}")

    # The selection table goes to stderr and the chosen profile to the output.
    sel = os.path.join(work, "sel.json")
    big = os.path.join(work, "big.fa")
    tmtest.write_fasta(big, [("b", ("ACGTTGCA" * 50 + "AATTATAT" * 50) * 5)])
    proc = run(binary, ["fit", big, "--classes", "1..2", "--order", "0", "--select", "bic", "--init-window", "100",
                        "-o", sel])
    checks.check(proc.returncode == 0 and "lowest BIC" in proc.stderr and os.path.exists(sel),
                 "--select bic prints its table and writes the chosen profile", "fit documentation",
                 proc.stderr[-300:])

    listing = tmtest.run(binary, ["profiles"])
    for name in ["cpg-island", "isochore", "gc-shift"]:
        line = [l for l in listing.splitlines() if l.split() and l.split()[0] == name]
        checks.check(len(line) == 1 and len(line[0].split()) > 3, f"'tidemark profiles' lists {name} with a description",
                     "issue 3: all built-ins documented in tidemark profiles", line[0] if line else "missing")

    failing = [
        (["fit", fasta, "-o", "X"], 2, "no starting point"),
        (["fit", fasta, "-p", "cpg-island", "--classes", "2", "-o", "X"], 2, "--profile with --classes"),
        (["fit", fasta, "--classes", "1..3", "-o", "X"], 2, "a class range without --select"),
        (["fit", fasta, "--classes", "0", "-o", "X"], 2, "zero classes"),
        (["fit", fasta, "--classes", "2..x", "-o", "X"], 2, "a malformed class range"),
        (["fit", "-", "-p", "cpg-island", "-o", "X"], 2, "standard input"),
        (["fit", fasta, "-p", start, "--freeze", "everything", "-o", "X"], 2, "an unknown --freeze word"),
        (["fit", fasta, "-p", start, "--freeze", "emissions:nosuch", "-o", "X"], 2, "--freeze of an unknown state"),
        (["fit", fasta, "--classes", "2", "--labels", bed, "-o", "X"], 2, "--labels with --classes"),
        (["fit", fasta, "-p", start, "--default-region", "bg", "-o", "X"], 2, "--default-region without --labels"),
        (["fit", fasta, "-p", start, "--max-iter", "-1", "-o", "X"], 2, "negative --max-iter"),
        (["fit", os.path.join(work, "missing.fa"), "-p", start, "-o", "X"], 1, "a missing FASTA file"),
        (["fit", fasta, "--classes", "3", "-o", "X"], 1, "too little sequence for the windows"),
        (["fit", fasta, "-p", os.path.join(work, "nosuch.json"), "-o", "X"], 1, "a missing profile"),
    ]
    bad_bed = os.path.join(work, "bad.bed")
    with open(bad_bed, "w", encoding="ascii") as f:
        f.write("c1\t2\t6\texon\n")
    failing.append((["fit", fasta, "-p", start, "--labels", bad_bed, "-o", "X"], 1, "a label naming no region"))
    for args, code, what in failing:
        target = os.path.join(work, "never.json")
        args = [target if a == "X" else a for a in args]
        proc = run(binary, args)
        checks.check(proc.returncode == code and "tidemark: " in proc.stderr and not os.path.exists(target),
                     f"fails on {what} with exit {code}, no output", EXIT,
                     f"exit {proc.returncode}: {proc.stderr.strip()[:200]}")


if __name__ == "__main__":
    tmtest.main("fit on the command line", body)
