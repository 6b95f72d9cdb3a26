#!/usr/bin/env python3
"""Labels for fitting the default cpg-island profile by counting (tidemark fit --labels): which
bases of a training stretch are CpG island and which are CpG-depleted background of K GC
classes. Deterministic: the same FASTA and arguments give the same BED.

  make-labels.py FASTA[.gz] RECORD BEGIN END BORDERS > labels.bed
      BEGIN, END: 0-based half-open; BORDERS: GC borders of the background classes, e.g.
      0.40,0.50 (three classes bg1 < 0.40 <= bg2 < 0.50 <= bg3)

Rules (tidemark's choices, with the published thresholds they use):
- island: the union of 500-bp windows (step 100 bp) without N that meet GC >= 0.55 and CpG
  o/e >= 0.65, the thresholds of Takai & Jones (2002), "Comprehensive analysis of CpG islands in
  human chromosomes 21 and 22", PNAS 99:3740-3745, with o/e = N(CpG) L / (N(C) N(G))
  (Gardiner-Garden & Frommer 1987, J. Mol. Biol. 196:261-282). Windows of 500 bp leave out most
  Alu repeats (about 300 bp), the reason Takai & Jones give for their > 500 bp (from memory).
- background: the rest, cut into 500-bp tiles, each labelled bg1..bgK by its GC fraction and
  BORDERS. Tiles with N are left unlabelled (tidemark counts nothing for unknown bases; an
  unlabelled known base goes to fit's --default-region).
Consecutive intervals with the same label are merged.
"""
import gzip
import sys

import numpy as np

ISLAND_WINDOW, ISLAND_STEP, TILE = 500, 100, 500
ISLAND_GC, ISLAND_OE = 0.55, 0.65


def read_record(path, name):
    opener = gzip.open if path.endswith(".gz") else open
    parts, current = [], None
    with opener(path, "rb") as f:
        for line in f:
            if line.startswith(b">"):
                if current == name:
                    break
                current = line[1:].split()[0].decode()
            elif current == name:
                parts.append(line.strip())
    return b"".join(parts).upper()


def main():
    path, name, begin, end = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
    borders = [float(x) for x in sys.argv[5].split(",")]
    seq = np.frombuffer(read_record(path, name)[begin:end], dtype=np.uint8)
    n = len(seq)
    is_c, is_g = seq == ord("C"), seq == ord("G")
    known = is_c | is_g | (seq == ord("A")) | (seq == ord("T"))
    cpg = np.zeros(n, dtype=bool)
    cpg[1:] = is_c[:-1] & is_g[1:]
    zero = np.zeros(1, dtype=np.int64)
    pc, pg = np.concatenate([zero, np.cumsum(is_c)]), np.concatenate([zero, np.cumsum(is_g)])
    pk, pcg = np.concatenate([zero, np.cumsum(known)]), np.concatenate([zero, np.cumsum(cpg)])

    island_label = len(borders) + 1
    label = np.full(n, -1, dtype=np.int8)  # -1 unlabelled, 0..K-1 background classes
    b = np.arange(0, max(n - ISLAND_WINDOW, 0) + 1, ISLAND_STEP)
    e = b + ISLAND_WINDOW
    c, g, k = pc[e] - pc[b], pg[e] - pg[b], pk[e] - pk[b]
    cg = pcg[e] - pcg[b + 1]  # CpG with both bases inside the window
    ok = (k == ISLAND_WINDOW) & (c + g >= ISLAND_GC * k) & (c * g > 0) & (cg * k >= ISLAND_OE * c * g)
    island = np.zeros(n + 1, dtype=np.int64)
    np.add.at(island, b[ok], 1)
    np.add.at(island, e[ok], -1)
    in_island = np.cumsum(island[:n]) > 0

    for t in range(0, n, TILE):
        u = min(t + TILE, n)
        kk = pk[u] - pk[t]
        if kk < u - t:
            continue
        gc = (pc[u] - pc[t] + pg[u] - pg[t]) / kk
        label[t:u] = int(np.searchsorted(borders, gc, side="right"))
    label[in_island] = island_label
    names = [f"bg{i + 1}" for i in range(len(borders) + 1)] + ["island"]
    change = np.flatnonzero(np.diff(label)) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change, [n]])
    for s, x in zip(starts, ends):
        if label[s] >= 0:
            sys.stdout.write(f"{name}\t{begin + s}\t{begin + x}\t{names[label[s]]}\n")


if __name__ == "__main__":
    main()
