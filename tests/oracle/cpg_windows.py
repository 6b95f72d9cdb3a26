"""An independent implementation of the Takai & Jones (2002) window procedure for CpG islands,
written for tidemark's oracle tests (it shares no code with tidemark).

Source: Takai D, Jones PA (2002), "Comprehensive analysis of CpG islands in human chromosomes 21
and 22", PNAS 99:3740-3745. Their thresholds are GC >= 55 %, observed/expected CpG >= 0.65 and
length > 500 bp, and their procedure moves 200-bp windows along the sequence.

Which details come from memory (see shared/REFERENCES.md, "CpG-island definitions as
procedures"; not checked against the paper):
  - the window is 200 bp and first slides 1 bp at a time until it meets both thresholds;
  - from a window that meets them, the next window starts 200 bp further on (no overlap), as
    long as each next window still meets them;
  - after the first window that fails, the last window is moved back 1 bp at a time until it
    meets them again, and the island ends with it;
  - the island as a whole is then tested, and while it fails, 1 bp is trimmed from each end;
  - islands separated by less than 100 bp are joined (our reading: the join is kept only when
    the joined island still meets the thresholds as a whole; otherwise the two stay apart);
  - islands are kept when longer than 500 bp and meeting GC >= 55 % and o/e >= 0.65 as a whole.
Our own choices (not from the paper): windows containing an unknown base (N) never meet the
thresholds; o/e = N(CpG) * L / (N(C) * N(G)) with L the window or island length (Gardiner-Garden
& Frommer 1987, J. Mol. Biol. 196:261-282), 0 when N(C) * N(G) = 0; a CpG counts in an interval
when both of its bases lie inside it.
"""

import gzip

import numpy as np

WINDOW = 200          # Takai & Jones (2002) [memory: window size]
MIN_GC = 0.55         # Takai & Jones (2002)
MIN_OE = 0.65         # Takai & Jones (2002)
MIN_LENGTH = 501      # "> 500 bp", Takai & Jones (2002)
JOIN_GAP = 100        # islands closer than 100 bp are joined [memory]


def read_fasta(path, name=None, begin=0, end=None):
    """Returns the uppercase sequence (bytes) of record `name` (the first when None), bases
    [begin, end) 0-based half-open; plain or gzip."""
    opener = gzip.open if path.endswith(".gz") else open
    chunks, current = [], None
    with opener(path, "rb") as f:
        for line in f:
            if line.startswith(b">"):
                if current is not None and (name is None or current == name):
                    break
                current = line[1:].split()[0].decode()
                continue
            if name is None or current == name:
                chunks.append(line.strip())
    seq = b"".join(chunks).upper()
    return seq[begin:end]


class Prefix:
    """Prefix sums of C, G, CpG and unknown bases, for interval counts in O(1)."""

    def __init__(self, seq):
        a = np.frombuffer(seq, dtype=np.uint8)
        self.n = len(a)
        is_c, is_g = a == ord("C"), a == ord("G")
        known = (a == ord("A")) | is_c | is_g | (a == ord("T"))
        cpg = np.zeros(len(a), dtype=bool)  # cpg[i]: C at i-1 and G at i
        cpg[1:] = is_c[:-1] & is_g[1:]
        zero = np.zeros(1, dtype=np.int64)
        self.c = np.concatenate([zero, np.cumsum(is_c, dtype=np.int64)])
        self.g = np.concatenate([zero, np.cumsum(is_g, dtype=np.int64)])
        self.cpg = np.concatenate([zero, np.cumsum(cpg, dtype=np.int64)])
        self.unknown = np.concatenate([zero, np.cumsum(~known, dtype=np.int64)])

    def counts(self, b, e):
        """C, G, CpG (both bases inside), unknown over [b, e) (scalars or arrays)."""
        c = self.c[e] - self.c[b]
        g = self.g[e] - self.g[b]
        cpg = self.cpg[e] - self.cpg[np.minimum(np.asarray(b) + 1, e)]
        return c, g, cpg, self.unknown[e] - self.unknown[b]

    def meets(self, b, e):
        """True where [b, e) has no unknown base, GC >= 55 % and o/e >= 0.65 (arrays allowed)."""
        c, g, cpg, unknown = self.counts(b, e)
        length = np.asarray(e) - np.asarray(b)
        gc_ok = (c + g) >= MIN_GC * length
        with np.errstate(divide="ignore", invalid="ignore"):
            oe = np.where(c * g > 0, cpg * length / np.maximum(c * g, 1), 0.0)
        return (unknown == 0) & gc_ok & (oe >= MIN_OE) & (length > 0)


def gc_oe(seq, b, e):
    """GC fraction and o/e of seq[b:e] over its known bases (o/e None when N(C)*N(G) = 0)."""
    s = seq[b:e]
    c, g = s.count(b"C"), s.count(b"G")
    known = c + g + s.count(b"A") + s.count(b"T")
    cpg = s.count(b"CG")
    gc = (c + g) / known if known else 0.0
    return gc, (cpg * known / (c * g) if c * g else None)


def takai_jones_islands(seq):
    """Islands of the Takai & Jones (2002) procedure as 0-based half-open (begin, end) pairs."""
    p = Prefix(seq)
    n = p.n
    if n < WINDOW:
        return []
    starts = np.arange(n - WINDOW + 1)
    window_ok = p.meets(starts, starts + WINDOW)  # window_ok[i]: window [i, i+200) meets both
    candidates = np.flatnonzero(window_ok)
    raw = []
    pos = 0
    while True:
        k = np.searchsorted(candidates, pos)
        if k == len(candidates):
            break
        first = int(candidates[k])
        last = first  # start of the last window that met the thresholds
        while last + WINDOW <= n - WINDOW and window_ok[last + WINDOW]:
            last += WINDOW
        # The next window (last + 200) fails or does not fit: move it back 1 bp at a time until
        # it meets the thresholds; it cannot pass `last`, which meets them.
        probe = min(last + WINDOW, n - WINDOW)
        while probe > last and not window_ok[probe]:
            probe -= 1
        b, e = first, probe + WINDOW
        while e - b >= WINDOW and not p.meets(b, e):  # trim 1 bp from each side
            b += 1
            e -= 1
        if e - b >= WINDOW:
            raw.append((b, e))
        pos = max(e, first + 1)
    joined = []
    for b, e in raw:
        if joined and b - joined[-1][1] < JOIN_GAP and p.meets(joined[-1][0], e):
            joined[-1] = (joined[-1][0], e)
        else:
            joined.append((b, e))
    return [(b, e) for b, e in joined if e - b >= MIN_LENGTH and p.meets(b, e)]


def overlapped_fraction(islands, calls):
    """Fraction of islands (begin, end) overlapped by at least one call (begin, end); both sorted."""
    if not islands:
        return 1.0
    call_b = np.array([c[0] for c in calls], dtype=np.int64)
    call_e = np.array([c[1] for c in calls], dtype=np.int64)
    hit = 0
    for b, e in islands:
        k = np.searchsorted(call_e, b, side="right")  # first call ending after b
        if k < len(call_b) and call_b[k] < e:
            hit += 1
    return hit / len(islands)
