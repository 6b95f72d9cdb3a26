#!/usr/bin/env python3
"""Writes data/demo/demo.fa.gz: two invented contigs of an imaginary assembly ("shoreline
worm", our own scenario) with planted CpG-rich islands, an assembly gap and soft-masked repeats.
Seeded, so the file is reproducible; run from the repository root."""
import gzip
import json
import random

rng = random.Random(20261201)
profile = json.load(open("data/profiles/cpg-island-2state.json"))  # the tables the demo was drawn from
rows = {s["name"]: s["emissions"] for s in profile["states"]}
ACGT = "ACGT"


def chain(state, n, prev):
    out = []
    for _ in range(n):
        row = rows[state][ACGT.index(prev)]
        prev = rng.choices(ACGT, weights=row)[0]
        out.append(prev)
    return "".join(out), prev


def contig(length, islands):
    seq, prev, pos = [], "A", 0
    for start, size in islands:
        s, prev = chain("bulk", start - pos, prev)
        seq.append(s)
        s, prev = chain("island", size, prev)
        seq.append(s)
        pos = start + size
    s, prev = chain("bulk", length - pos, prev)
    seq.append(s)
    return "".join(seq)


c1 = contig(150_000, [(12_000, 1_200), (47_500, 800), (90_000, 2_500), (131_000, 600)])
c1 = c1[:70_000] + "N" * 500 + c1[70_500:]          # an assembly gap
c1 = c1[:100_000] + c1[100_000:103_000].lower() + c1[103_000:]  # a soft-masked repeat
c2 = contig(60_000, [(20_000, 1_500), (41_000, 400)])
text = []
for name, seq in (("demo_contig_1", c1), ("demo_contig_2", c2)):
    text.append(f">{name} invented demo contig (shoreline worm scenario)\n")
    text.extend(seq[i:i + 60] + "\n" for i in range(0, len(seq), 60))
with open("data/demo/demo.fa.gz", "wb") as raw:
    with gzip.GzipFile(fileobj=raw, mode="wb", compresslevel=9, mtime=0) as out:
        out.write("".join(text).encode())
