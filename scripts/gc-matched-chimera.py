#!/usr/bin/env python3
"""Quick check of window signatures: real foreign segments with the host's GC, inserted.

Builds a chimera of E. coli K-12 MG1655 (Debian ragout-examples) with segments of 20-50 kb from
V. cholerae O395 (same package) whose G+C lies within 1 point of K-12's, fits and scans it with
each profile named, and prints per profile how many inserts are >= 50 % covered by calls and
the share of host bases called. A check during development, not the benchmark panel.

  scripts/gc-matched-chimera.py TIDEMARK_BINARY WORKDIR [PROFILE ...]   (default: gc-shift
  composition-shift)
"""
import gzip
import random
import subprocess
import sys
import time
from pathlib import Path

RAGOUT = Path("/usr/share/doc/ragout/examples")
HOST = RAGOUT / "E.Coli/references/MG1655-K12.fasta.gz"
DONOR = RAGOUT / "V.Cholerae/references/O395.fasta.gz"
INSERTS = 8
SEED = 21


def read_fasta(path):
    records, name, parts = [], None, []
    with gzip.open(path, "rt") as f:
        for line in f:
            if line.startswith(">"):
                if name is not None:
                    records.append((name, "".join(parts).upper()))
                name, parts = line[1:].split()[0], []
            else:
                parts.append(line.strip())
    if name is not None:
        records.append((name, "".join(parts).upper()))
    return records


def gc(seq):
    known = sum(seq.count(b) for b in "ACGT")
    return (seq.count("G") + seq.count("C")) / known if known else 0.0


def build(workdir):
    host = read_fasta(HOST)[0][1]
    donor = "".join(s for _, s in read_fasta(DONOR))
    host_gc = gc(host)
    rng = random.Random(SEED)
    segments = []
    tries = 0
    while len(segments) < INSERTS and tries < 100000:
        tries += 1
        length = rng.randrange(20000, 50001)
        start = rng.randrange(0, len(donor) - length)
        seg = donor[start:start + length]
        if "N" in seg or abs(gc(seg) - host_gc) > 0.01:
            continue
        if any(abs(start - s) < 60000 for s, _ in segments):
            continue
        segments.append((start, seg))
    # insert at evenly spaced host positions
    step = len(host) // (len(segments) + 1)
    out, truth, pos, last = [], [], 0, 0
    for i, (_, seg) in enumerate(segments):
        at = step * (i + 1)
        out.append(host[last:at])
        pos += at - last
        truth.append((pos, pos + len(seg), gc(seg)))
        out.append(seg)
        pos += len(seg)
        last = at
    out.append(host[last:])
    chimera = "".join(out)
    fa = workdir / "chimera.fa"
    with open(fa, "w") as f:
        f.write(">chimera\n")
        for i in range(0, len(chimera), 80):
            f.write(chimera[i:i + 80] + "\n")
    print(f"host G+C {host_gc:.4f}; {len(truth)} inserts from {DONOR.name}:")
    for b, e, g in truth:
        print(f"  {b}-{e} ({(e - b) / 1000:.1f} kb, G+C {g:.4f})")
    return fa, truth, len(chimera)


def run(binary, fa, profile, workdir, truth, length):
    stem = workdir / profile.replace("/", "_")
    t0 = time.time()
    subprocess.run([binary, "fit", str(fa), "-p", profile, "-o", f"{stem}.json", "-t", "1"],
                   check=True, capture_output=True)
    t1 = time.time()
    subprocess.run([binary, "scan", str(fa), "-p", f"{stem}.json", "-o", f"{stem}.bed",
                    "-t", "1"], check=True, capture_output=True)
    t2 = time.time()
    calls = []
    for line in open(f"{stem}.bed"):
        if line.startswith(("#", "track", "browser")):
            continue
        f = line.split("\t")
        calls.append((int(f[1]), int(f[2])))
    covered = 0
    for b, e, _ in truth:
        hit = sum(max(0, min(e, ce) - max(b, cb)) for cb, ce in calls)
        covered += hit >= 0.5 * (e - b)
    called = sum(ce - cb for cb, ce in calls)
    in_truth = sum(max(0, min(e, ce) - max(b, cb)) for cb, ce in calls for b, e, _ in truth)
    host = length - sum(e - b for b, e, _ in truth)
    print(f"{profile}: {covered}/{len(truth)} inserts >= 50 % covered; "
          f"{(called - in_truth) / host * 100:.2f} % of host bases called; {len(calls)} calls; "
          f"fit {t1 - t0:.1f} s, scan {t2 - t1:.1f} s (-t 1)")


def main():
    binary, workdir = sys.argv[1], Path(sys.argv[2])
    profiles = sys.argv[3:] or ["gc-shift", "composition-shift"]
    workdir.mkdir(parents=True, exist_ok=True)
    fa, truth, length = build(workdir)
    for p in profiles:
        run(binary, fa, p, workdir, truth, length)


if __name__ == "__main__":
    main()
