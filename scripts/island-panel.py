#!/usr/bin/env python3
"""The islands benchmark panel: runs one islands template (a built-in name or a profile file) on
real genomes from Debian example packages with the README's recipe (`tidemark fit G -p TEMPLATE
-o P.json`, then `tidemark scan G -p P.json`) and scores the calls against three kinds of truth
that no island predictor made:

- comparative (after Langille, Hsiao & Brinkman 2008, "Evaluation of genomic island predictors
  using a comparative genomics approach", BMC Bioinformatics 9:329): 1-kb windows of a query
  genome whose bases are (almost) all missing from every comparison genome of the same species
  are island positives (runs >= 8 kb, the minimum of that paper; one window between two such
  runs that is not in the core joins them); windows whose bases (almost)
  all occur in every comparison genome are the shared core (the negatives);
- GC-matched chimeras: 12 real segments of 20-50 kb from two other genera (V. cholerae,
  Klebsiella), each within 1 point of E. coli K-12's GC, inserted into K-12 at fixed positions;
- planted drafts: the real E. coli MG1655 draft with 20 foreign contigs of 5-50 kb (10 within 1
  point of its GC, 10 not) from other genera; the same for the real V. cholerae H1, S. aureus
  USA300 and H. pylori SJM180 drafts (part "drafts"; DRAFTS names the donors).

Presence is our own k-mer method (numpy; no alignment or island tool): k = 25, a window is
'absent' from a genome when fewer than 20 % of its valid k-mers occur in it, 'present' when more
than 80 % do, where a base counts as found when a 25-mer containing it occurs (canonical: either
strand). k and both thresholds are our choices: a 25-mer of an unrelated genome of 5 Mbp matches
by chance with probability about 5e6 / 4^25 (4e-9), and at the point differences between strains
of one species (1-3 %) most bases of a shared gene still lie in an intact 25-mer.

Everything is deterministic (fixed donors, lengths and positions; no random numbers). The truth
construction (window states, chimera and draft FASTA with their truth) is cached under --cache.

  python3 scripts/island-panel.py --tidemark build/tidemark --template gc-shift [--reduced]
"""

import argparse
import gzip
import hashlib
import json
import lzma
import os
import re
import resource
import subprocess
import sys
import time

import numpy as np

RAGOUT = "/usr/share/doc/ragout/examples"  # Debian ragout-examples
KLEB = "/usr/share/doc/kleborate/examples/data"  # Debian kleborate-examples
BOWTIE = "/usr/share/doc/bowtie/examples/genomes"  # Debian bowtie-examples

GENOMES = {
    "ecoli_k12": f"{RAGOUT}/E.Coli/references/MG1655-K12.fasta.gz",
    "ecoli_dh1": f"{RAGOUT}/E.Coli/references/DH1.fasta.gz",
    "ecoli_536": f"{BOWTIE}/NC_008253.fna.gz",
    "ecoli_draft": f"{RAGOUT}/E.Coli/mg1655_contigs.fasta.gz",
    "vc_draft": f"{RAGOUT}/V.Cholerae/h1_contigs.fasta.gz",
    "sa_draft": f"{RAGOUT}/S.Aureus/usa300_contigs.fasta.gz",
    "hp_draft": f"{RAGOUT}/H.Pylori/SJM180_contigs.fasta.gz",
    "hs_chrx": "/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz",  # Debian smalt-examples
    "vc_n16961": f"{RAGOUT}/V.Cholerae/references/O1_biovar.fasta.gz",
    "vc_o395": f"{RAGOUT}/V.Cholerae/references/O395.fasta.gz",
    "vc_inaba": f"{RAGOUT}/V.Cholerae/references/O1_Inaba.fasta.gz",
    "vc_h1": f"{RAGOUT}/V.Cholerae/references/H1.fasta.gz",
    "hp_g27": f"{RAGOUT}/H.Pylori/references/G27.fasta.gz",
    "hp_els37": f"{RAGOUT}/H.Pylori/references/ELS37.fasta.gz",
    "hp_gambia": f"{RAGOUT}/H.Pylori/references/Gambia94_24.fasta.gz",
    "hp_puno": f"{RAGOUT}/H.Pylori/references/Puno120.fasta.gz",
    "hp_sjm180": f"{RAGOUT}/H.Pylori/references/SJM180.fasta.gz",
    "sa_usa300": f"{RAGOUT}/S.Aureus/references/USA300_FPR3757.fasta.gz",
    "sa_col": f"{RAGOUT}/S.Aureus/references/COL.fasta.gz",
    "sa_n315": f"{RAGOUT}/S.Aureus/references/N315.fasta.gz",
    "sa_rf122": f"{RAGOUT}/S.Aureus/references/RF122.fasta.gz",
    "sa_jkd6008": f"{RAGOUT}/S.Aureus/references/JKD6008.fasta.gz",
    "kp_mgh78578": f"{KLEB}/MGH78578.fna.xz",
    "kp_ntuh": f"{KLEB}/NTUH-K2044.fna.xz",
    "kp_hs11286": f"{KLEB}/Klebs_HS11286.fna.xz",
    "kp_1084": f"{KLEB}/Klebs_Kp1084.fna.xz",
}

# Comparative panel: (label, query, comparison genomes, remark on the truth). The comparisons are
# strains of the query's species. E. coli K-12 has one: DH1 is itself a K-12 strain, so it shares
# K-12's own islands and would hide them. V. cholerae N16961 has one too: against O395 and the two
# other El Tor strains of the package no 8-kb window is absent from all three. H. pylori strains
# differ at so many positions that few windows are 'present' by 25-mers: the row shows the
# method's limit. Whether a row is held out is the template's to say (template_notes).
COMPARATIVE = [
    ("E. coli K-12 MG1655", "ecoli_k12", ["ecoli_536"], "one comparison (DH1 is a K-12 strain)"),
    ("E. coli 536", "ecoli_536", ["ecoli_k12", "ecoli_dh1"], ""),
    ("V. cholerae N16961", "vc_n16961", ["vc_o395"],
     "one comparison (the other O1 El Tor strains, Inaba G4222 and H1, share N16961's islands)"),
    ("H. pylori G27", "hp_g27", ["hp_els37", "hp_gambia", "hp_puno", "hp_sjm180"],
     "too divergent for 25-mers: almost no core, no island"),
    ("S. aureus USA300", "sa_usa300", ["sa_n315", "sa_rf122"],
     "COL (CC8, as USA300) and JKD6008 (ST239, partly CC8) left out (lineages from memory)"),
    ("K. pneumoniae MGH78578", "kp_mgh78578", ["kp_ntuh", "kp_hs11286", "kp_1084"], ""),
]
REDUCED = ["E. coli K-12 MG1655"]

K = 25
WINDOW = 1000
ABSENT_BELOW = 0.2
PRESENT_ABOVE = 0.8
MIN_ISLAND = 8000  # Langille et al. 2008: comparative islands of at least 8 kb
CACHE_VERSION = "1"

_CODE = np.full(256, 4, np.uint8)
for _i, _b in enumerate(b"ACGT"):
    _CODE[_b] = _i
    _CODE[_b + 32] = _i


# ---------------------------------------------------------------------------------------------
# Sequences.

def read_fasta(path):
    """[(name, sequence as str)] of a FASTA file (plain, .gz or .xz); the name is the first word."""
    opener = gzip.open if path.endswith(".gz") else lzma.open if path.endswith(".xz") else open
    with opener(path, "rt") as f:
        text = f.read()
    records = []
    for chunk in text.split(">")[1:]:
        header, _, body = chunk.partition("\n")
        records.append((header.split()[0] if header.split() else "", re.sub(r"\s+", "", body)))
    return records


def write_fasta(path, records, width=80):
    tmp = path + ".tmp"
    with open(tmp, "w") as out:
        for name, seq in records:
            out.write(f">{name}\n")
            for i in range(0, len(seq), width):
                out.write(seq[i:i + width] + "\n")
    os.replace(tmp, path)


def codes_of(seq):
    return _CODE[np.frombuffer(seq.encode("ascii"), np.uint8)]


def gc_of(seq):
    c = codes_of(seq)
    known = int(np.count_nonzero(c < 4))
    return float(np.count_nonzero((c == 1) | (c == 2))) / known if known else float("nan")


class GcIndex:
    """Prefix sums of G+C and known bases of one sequence: GC of any interval in O(1)."""

    def __init__(self, seq):
        c = codes_of(seq)
        self.gc = np.concatenate([[0], np.cumsum((c == 1) | (c == 2))])
        self.known = np.concatenate([[0], np.cumsum(c < 4)])

    def fraction(self, a, b):
        n = self.known[b] - self.known[a]
        return (self.gc[b] - self.gc[a]) / n if n else float("nan")


# ---------------------------------------------------------------------------------------------
# Canonical k-mers and presence.

def forward_codes(c, k):
    """2-bit codes (first base most significant) of every k-mer start of the base codes c (0-3),
    built by doubling: codes of length 2m from two of length m, so about log2(k) passes."""
    n = len(c) - k + 1
    parts = {1: c.astype(np.uint64)}
    m = 1
    while 2 * m <= k:  # codes of 2, 4, 8, 16 bases
        prev = parts[m]
        parts[2 * m] = (prev[:len(prev) - m] << np.uint64(2 * m)) | prev[m:]
        m *= 2
    out, have = None, 0
    for length in sorted(parts, reverse=True):  # k as a sum of powers of two
        if have + length <= k:
            piece = parts[length]
            out = piece[:n].copy() if out is None else (out << np.uint64(2 * length)) | piece[have:have + n]
            have += length
    return out


def canonical_kmers(seq, k=K):
    """(codes, valid) for every k-mer start of seq: the smaller of the 2-bit codes of the k-mer and
    its reverse complement (A=0 C=1 G=2 T=3, first base most significant), and whether the k-mer
    has only A, C, G, T."""
    c = codes_of(seq)
    n = len(c) - k + 1
    if n <= 0:
        return np.zeros(0, np.uint64), np.zeros(0, bool)
    bad = np.concatenate([[0], np.cumsum(c >= 4)])
    valid = (bad[k:] - bad[:n]) == 0
    c = np.where(c < 4, c, 0).astype(np.uint8)
    fwd = forward_codes(c, k)
    rev = forward_codes((3 - c)[::-1], k)[::-1]
    return np.minimum(fwd, rev), valid


def found_in(codes, reference_set):
    """Whether each code occurs in the sorted reference_set (searching in sorted order, which
    keeps the binary searches in cache)."""
    if len(reference_set) == 0:
        return np.zeros(len(codes), bool)
    order = np.argsort(codes)
    sorted_codes = codes[order]
    idx = np.searchsorted(reference_set, sorted_codes)
    hit = reference_set[np.minimum(idx, len(reference_set) - 1)] == sorted_codes
    found = np.empty(len(codes), bool)
    found[order] = hit
    return found


def kmer_set(records, k=K):
    """Sorted unique canonical k-mers of all records."""
    parts = []
    for _, seq in records:
        codes, valid = canonical_kmers(seq, k)
        parts.append(np.unique(codes[valid]))
    return np.unique(np.concatenate(parts)) if parts else np.zeros(0, np.uint64)


def window_presence(seq, reference_set, k=K, window=WINDOW):
    """Per window of `window` bases: the share of its bases covered by a k-mer that occurs in
    reference_set, among its bases covered by any valid k-mer (NaN for a window with fewer than
    half its bases so covered). Base coverage, rather than the share of shared k-mers, keeps a
    homologous window 'present' at the point differences between strains: at 2 % divergence only
    (0.98)^25 = 60 % of the 25-mers are shared, but about 90 % of the bases lie in a shared one."""
    codes, valid = canonical_kmers(seq, k)
    L = len(seq)
    nwin = (L + window - 1) // window
    if len(codes) == 0:
        return np.full(nwin, np.nan)
    found = found_in(codes, reference_set) & valid

    def covered_by(flags):  # base i is covered when a flagged k-mer starts in [i - k + 1, i]
        cs = np.concatenate([[0], np.cumsum(flags)])
        i = np.arange(L)
        hi = np.minimum(i, len(flags) - 1) + 1
        lo = np.maximum(i - k + 1, 0)
        return (cs[hi] - cs[np.minimum(lo, len(flags))]) > 0

    any_valid = covered_by(valid)
    shared = covered_by(found)
    win = np.arange(L) // window
    total = np.bincount(win, weights=any_valid, minlength=nwin)
    hits = np.bincount(win, weights=shared, minlength=nwin)
    size = np.bincount(win, minlength=nwin)
    share = np.full(nwin, np.nan)
    ok = total >= 0.5 * size
    share[ok] = hits[ok] / total[ok]
    return share


def runs(mask):
    """[(first, last + 1)] of the runs of True in a boolean array."""
    m = np.concatenate([[False], np.asarray(mask, bool), [False]])
    d = np.flatnonzero(m[1:] != m[:-1])
    return list(zip(d[::2].tolist(), d[1::2].tolist()))


def comparative_truth(query_records, comparison_sets, window=WINDOW, min_island=MIN_ISLAND):
    """{record: {"islands": [(start, end)], "core": [(start, end)]}} in base coordinates:
    islands = runs of windows absent from every comparison genome, at least min_island bases;
    core = runs of windows present in every comparison genome."""
    truth = {}
    for name, seq in query_records:
        shares = [window_presence(seq, s) for s in comparison_sets]
        with np.errstate(invalid="ignore"):
            absent = np.all([sh < ABSENT_BELOW for sh in shares], axis=0)
            present = np.all([sh > PRESENT_ABOVE for sh in shares], axis=0)
        L = len(seq)
        # A single window between two absent runs that is not in the core (say, an insertion
        # element shared with some comparison genome) does not split an island (our choice).
        gaps = runs(~absent)
        for a, b in gaps:
            if b - a == 1 and 0 < a and b < len(absent) and not present[a]:
                absent[a] = True
        islands = [(a * window, min(b * window, L)) for a, b in runs(absent)]
        islands = [(a, b) for a, b in islands if b - a >= min_island]
        core = [(a * window, min(b * window, L)) for a, b in runs(present)]
        truth[name] = {"islands": islands, "core": core, "length": L}
    return truth


# ---------------------------------------------------------------------------------------------
# Cache.

class Cache:
    def __init__(self, folder):
        self.folder = folder
        os.makedirs(folder, exist_ok=True)

    def path(self, *parts, ext):
        key = hashlib.sha1(json.dumps([CACHE_VERSION, K, WINDOW, ABSENT_BELOW, PRESENT_ABOVE, MIN_ISLAND]
                                      + list(parts)).encode()).hexdigest()[:16]
        return os.path.join(self.folder, f"{key}.{ext}")

    def plain_fasta(self, genome):
        """A plain FASTA copy of a packaged genome (tidemark reads plain or gzip; .xz it does not)."""
        out = self.path("fasta", GENOMES[genome], ext="fa")
        if not os.path.exists(out):
            write_fasta(out, read_fasta(GENOMES[genome]))
        return out

    def json(self, parts, build):
        out = self.path(*parts, ext="json")
        if os.path.exists(out):
            with open(out) as f:
                return json.load(f)
        value = build()
        with open(out + ".tmp", "w") as f:
            json.dump(value, f)
        os.replace(out + ".tmp", out)
        return value


def cached_comparative(cache, query, comparisons):
    def build():
        sets = [kmer_set(read_fasta(GENOMES[c])) for c in comparisons]
        truth = comparative_truth(read_fasta(GENOMES[query]), sets)
        return {n: {"islands": t["islands"], "core": t["core"], "length": t["length"]} for n, t in truth.items()}
    return cache.json(["comparative", GENOMES[query]] + [GENOMES[c] for c in comparisons], build)


# ---------------------------------------------------------------------------------------------
# Chimeras and the planted draft.

def pick_segments(donors, lengths, target_gc, tolerance, exclude_gc=None, step=5000):
    """Deterministic segments: for segment i, the donors (name, seq) from donors[i % len(donors)]
    on, each scanned from position (i * 619,000) mod its length in steps of `step`, give the first
    stretch of lengths[i] bases without unknown bases and with |GC - target_gc| <= tolerance (or,
    with exclude_gc, |GC - exclude_gc| >= tolerance) that overlaps no earlier pick."""
    picks, taken = [], {}
    for i, length in enumerate(lengths):
        for d in range(len(donors)):
            name, seq = donors[(i + d) % len(donors)]
            gci, used = taken.setdefault(name, (GcIndex(seq), []))
            span = max(1, len(seq) - length)
            start0 = (i * 619_000) % span
            pick = None
            for j in range(0, len(seq) // step):
                a = (start0 + j * step) % span
                b = a + length
                if any(a < ub and ua < b for ua, ub in used) or gci.known[b] - gci.known[a] != length:
                    continue
                g = gci.fraction(a, b)
                if (abs(g - exclude_gc) >= tolerance if exclude_gc is not None
                        else abs(g - target_gc) <= tolerance):
                    pick = {"donor": name, "start": a, "end": b, "gc": float(g), "seq": seq[a:b]}
                    break
            if pick:
                used.append((pick["start"], pick["end"]))
                picks.append(pick)
                break
        else:
            raise RuntimeError(f"no segment of {length} bases found in the donors")
    return picks


def cached_chimera(cache):
    """K-12 with 12 GC-matched foreign segments inserted; returns (fasta path, truth dict)."""
    fasta = cache.path("chimera", ext="fa")

    def build():
        host_name, host = read_fasta(GENOMES["ecoli_k12"])[0]
        host_gc = gc_of(host)
        vc = read_fasta(GENOMES["vc_n16961"])
        kp = read_fasta(GENOMES["kp_ntuh"])[:1]
        donors = [vc[0], kp[0]]  # chromosome II of V. cholerae has no long stretch at K-12's GC
        lengths = [int(round(x, -3)) for x in np.linspace(20000, 50000, 12)]
        segs = pick_segments(donors, lengths, host_gc, 0.01)
        # Insert positions: 13 equal parts of the host, rounded to 1 kb (host coordinates).
        cuts = [int(round(len(host) * (j + 1) / 13, -3)) for j in range(12)]
        out, truth, prev, shift = [], [], 0, 0
        for cut, seg in zip(cuts, segs):
            out.append(host[prev:cut])
            start = cut + shift
            out.append(seg["seq"])
            truth.append({"start": start, "end": start + len(seg["seq"]), "donor": seg["donor"],
                          "donor_start": seg["start"], "gc": seg["gc"], "host_cut": cut})
            shift += len(seg["seq"])
            prev = cut
        out.append(host[prev:])
        write_fasta(fasta, [("k12_chimera", "".join(out))])
        return {"record": "k12_chimera", "host_gc": host_gc, "inserts": truth}
    if not os.path.exists(fasta):
        path = cache.path("chimera", ext="json")
        if os.path.exists(path):
            os.remove(path)
    return fasta, cache.json(["chimera"], build)


# Planted drafts: (key, label, draft, donors of the GC-matched contigs, donors of the others,
# GC tolerance of the matched ones). The E. coli draft is the issue's; the others test the contig
# screen on drafts of other genera (GC-matched donors of AT-rich hosts are few, so those take human
# chrX segments as well: human DNA in a bacterial draft is a common contaminant, common practice).
DRAFTS = [
    ("draft", "E. coli MG1655 draft", "ecoli_draft", ["vc_o395", "kp_hs11286"],
     ["sa_col", "kp_hs11286", "hp_g27"]),
    ("draft_vc", "V. cholerae H1 draft", "vc_draft", ["ecoli_k12", "kp_hs11286"],
     ["sa_col", "hp_g27", "kp_hs11286"]),
    ("draft_sa", "S. aureus USA300 draft", "sa_draft", ["hs_chrx", "hp_g27"],
     ["ecoli_k12", "kp_hs11286", "vc_o395"]),
    ("draft_hp", "H. pylori SJM180 draft", "hp_draft", ["hs_chrx", "sa_col"],
     ["ecoli_k12", "kp_hs11286", "sa_col"]),
]


def cached_draft(cache, key="draft"):
    """A real draft with 20 foreign contigs of 5-50 kb (10 within 1 point of the draft's GC, 10
    at least 3 points away) from the donors DRAFTS names for key (each donor's first record);
    returns (fasta path, truth dict)."""
    _, _, draft, matched_from, unmatched_from = next(d for d in DRAFTS if d[0] == key)
    fasta = cache.path(key, ext="fa")

    def build():
        native = read_fasta(GENOMES[draft])
        draft_gc = gc_of("".join(s for _, s in native))
        lengths = [int(round(x, -2)) for x in np.linspace(5000, 50000, 20)]
        first = {g: read_fasta(GENOMES[g])[0] for g in set(matched_from + unmatched_from)}
        matched = pick_segments([first[g] for g in matched_from], lengths[0::2], draft_gc, 0.01)
        unmatched = pick_segments([first[g] for g in unmatched_from], lengths[1::2], draft_gc, 0.03,
                                  exclude_gc=draft_gc)
        planted = []
        for i in range(10):
            planted.append((matched[i], True))
            planted.append((unmatched[i], False))
        records, truth = list(native), []
        # Foreign contig j goes after native record (7 j + 3) mod N (of the native order).
        slots = {}
        for j, (seg, m) in enumerate(planted):
            slots.setdefault((7 * j + 3) % len(native), []).append((j, seg, m))
        out = []
        for i, rec in enumerate(native):
            out.append(rec)
            for j, seg, m in slots.get(i, []):
                name = f"contig_f{j + 1:02d}"
                out.append((name, seg["seq"]))
                truth.append({"name": name, "length": len(seg["seq"]), "donor": seg["donor"],
                              "gc": seg["gc"], "gc_matched": m})
        write_fasta(fasta, out)
        return {"draft_gc": draft_gc, "foreign": truth,
                "native": {n: len(s) for n, s in native}}
    if not os.path.exists(fasta):
        path = cache.path(key, ext="json")
        if os.path.exists(path):
            os.remove(path)
    return fasta, cache.json([key], build)


# ---------------------------------------------------------------------------------------------
# Running the recipe and scoring.

def run_recipe(binary, fasta, template, folder, threads):
    """fit + scan with the README's recipe; returns (profile, calls, summary, seconds)."""
    os.makedirs(folder, exist_ok=True)
    t0 = time.monotonic()
    cpu0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    for args in (["fit", fasta, "-p", template, "-o", "P.json", "-t", str(threads), "-q"],
                 ["scan", fasta, "-p", "P.json", "-o", "calls.bed", "--summary", "summary.json",
                  "-t", str(threads), "-q"]):
        proc = subprocess.run([binary] + args, cwd=folder, capture_output=True, text=True)
        if proc.returncode != 0:
            raise RuntimeError(f"tidemark {' '.join(args)} exited with {proc.returncode}:\n{proc.stderr}")
    cpu1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    seconds = time.monotonic() - t0
    run_recipe.cpu_seconds += cpu1.ru_utime + cpu1.ru_stime - cpu0.ru_utime - cpu0.ru_stime
    with open(os.path.join(folder, "P.json")) as f:
        profile = json.load(f)
    with open(os.path.join(folder, "summary.json")) as f:
        summary = json.load(f)
    calls = []
    with open(os.path.join(folder, "calls.bed")) as f:
        for line in f:
            if line.startswith(("#", "track")) or not line.strip():
                continue
            x = line.split("\t")
            calls.append((x[0], int(x[1]), int(x[2]), x[3]))
    return profile, calls, summary, seconds


run_recipe.cpu_seconds = 0.0  # CPU time of every tidemark run so far (user + system)


def mask_of(intervals, length):
    m = np.zeros(length, bool)
    for a, b in intervals:
        m[a:b] = True
    return m


def called_masks(calls, lengths):
    masks = {n: np.zeros(L, bool) for n, L in lengths.items()}
    for chrom, a, b, _ in calls:
        masks[chrom][a:b] = True
    return masks


def boundary_errors(truth_intervals, calls_on_chrom, called):
    """Distance from each end of each true interval that a call overlaps to the nearest call end."""
    ends = np.array(sorted({x for _, a, b, _ in calls_on_chrom for x in (a, b)}), dtype=np.int64)
    errors = []
    for a, b in truth_intervals:
        if len(ends) == 0 or not called[a:b].any():
            continue
        for x in (a, b):
            errors.append(int(np.min(np.abs(ends - x))))
    return errors


def direction_of(name):
    """-1 for a region named for AT, +1 for GC, 0 for neither (by the words of its name)."""
    words = set(re.split(r"[_\-\s]+", name.lower()))
    at, gc = bool(words & {"at", "atrich", "at-rich"}), bool(words & {"gc", "gcrich", "gc-rich"})
    return -1 if at and not gc else 1 if gc and not at else 0


def typical_gc(profile, summary):
    """The typical (background: unreported) class's fitted GC mean, else the genome's GC."""
    background = {r["name"] for r in profile["regions"] if not r.get("report", False)}
    means = [s["gc"]["mean"] for s in profile["states"] if s["region"] in background and "gc" in s]
    if len(means) == 1:
        return means[0], "typical class"
    return summary["genome"]["gc_fraction"], "genome GC"


def contradictions(calls, seqs, profile, summary):
    """Calls whose name claims a GC direction with their measured GC on the other side of the
    typical class's mean."""
    ref, _ = typical_gc(profile, summary)
    index, wrong = {}, []
    for chrom, a, b, name in calls:
        d = direction_of(name)
        if d == 0:
            continue
        gci = index.setdefault(chrom, GcIndex(seqs[chrom]))
        g = gci.fraction(a, b)
        if (d < 0 and g >= ref) or (d > 0 and g <= ref):
            wrong.append((chrom, a, b, name, g))
    return wrong


def score_intervals(truth_by_chrom, calls, lengths):
    called = called_masks(calls, lengths)
    covered, total, errors = 0, 0, []
    for chrom, ivs in truth_by_chrom.items():
        for a, b in ivs:
            total += 1
            covered += called[chrom][a:b].mean() >= 0.5
        errors += boundary_errors(ivs, [c for c in calls if c[0] == chrom], called[chrom])
    return covered, total, errors, called


def fmt_kb(errors):
    return f"{np.median(errors) / 1000:.1f}" if errors else "–"


def template_notes(template):
    """{row key: note} from the template's provenance.benchmark_panel (row keys: the comparative
    query genomes, "chimera", "draft"), so that the table says which rows chose the template's
    settings and which are held out as the template itself records it. A built-in name is read
    from data/profiles/NAME.json beside this script."""
    path = template if os.path.exists(template) else os.path.join(
        os.path.dirname(os.path.abspath(__file__)), "..", "data", "profiles", f"{template}.json")
    try:
        with open(path) as f:
            notes = json.load(f).get("provenance", {}).get("benchmark_panel", {})
    except OSError:
        notes = {}
    return {key: str(text) for key, text in notes.items()}


def note_of(notes, key, remark=""):
    status = notes.get(key, "held out or not: the template's provenance does not say")
    return f"{status}; {remark}" if remark else status


def panel(binary, template, cache_dir, work, threads, reduced=False, log=print,
          parts=("comparative", "chimera", "draft", "drafts")):
    cache = Cache(cache_dir)
    notes = template_notes(template)
    rows = []
    chosen = [c for c in COMPARATIVE if (not reduced or c[0] in REDUCED) and "comparative" in parts]
    for label, query, comparisons, remark in chosen:
        t0 = time.monotonic()
        truth = cached_comparative(cache, query, comparisons)
        t_truth = time.monotonic() - t0
        fasta = cache.plain_fasta(query)
        seqs = dict(read_fasta(fasta))
        lengths = {n: len(s) for n, s in seqs.items()}
        profile, calls, summary, secs = run_recipe(binary, fasta, template, os.path.join(work, query), threads)
        islands = {n: t["islands"] for n, t in truth.items()}
        covered, total, errors, called = score_intervals(islands, calls, lengths)
        core_bases = core_called = 0
        for n, t in truth.items():
            cm = mask_of(t["core"], t["length"])
            core_bases += int(cm.sum())
            core_called += int((cm & called[n]).sum())
        wrong = contradictions(calls, seqs, profile, summary)
        rows.append({"genome": label, "truth": "comparative vs " + ", ".join(comparisons),
                     "note": note_of(notes, query, remark),
                     "islands": (int(covered), total), "core_called": core_called / max(1, core_bases),
                     "core_bases": core_bases, "boundary_kb": fmt_kb(errors), "boundary": errors,
                     "calls": len(calls), "contradicting": len(wrong), "wrong": wrong[:5],
                     "seconds": secs, "truth_seconds": t_truth})
        log(f"# {label}: {covered}/{total} islands >= 50 % covered, core called "
            f"{100 * rows[-1]['core_called']:.1f} %, {len(calls)} calls, {len(wrong)} contradicting; "
            f"recipe {secs:.1f} s, truth {t_truth:.1f} s")

    if "chimera" not in parts:
        return rows + draft_row(binary, template, cache, work, threads, log, notes, draft_keys(parts))
    # Chimeras.
    t0 = time.monotonic()
    fasta, truth = cached_chimera(cache)
    t_truth = time.monotonic() - t0
    seqs = dict(read_fasta(fasta))
    lengths = {n: len(s) for n, s in seqs.items()}
    profile, calls, summary, secs = run_recipe(binary, fasta, template, os.path.join(work, "chimera"), threads)
    ivs = [(x["start"], x["end"]) for x in truth["inserts"]]
    covered, total, errors, called = score_intervals({truth["record"]: ivs}, calls, lengths)
    host = ~mask_of(ivs, lengths[truth["record"]])
    wrong = contradictions(calls, seqs, profile, summary)
    rows.append({"genome": "K-12 + 12 GC-matched inserts", "truth": "chimera (V. cholerae, Klebsiella)",
                 "note": note_of(notes, "chimera"), "islands": (int(covered), total),
                 "core_called": float((host & called[truth["record"]]).sum() / host.sum()),
                 "boundary_kb": fmt_kb(errors), "boundary": errors, "calls": len(calls),
                 "contradicting": len(wrong), "wrong": wrong[:5], "seconds": secs, "truth_seconds": t_truth,
                 "per_insert": [float(called[truth["record"]][a:b].mean()) for a, b in ivs]})
    log(f"# chimera: {covered}/{total} inserts >= 50 % covered, boundary error median {fmt_kb(errors)} kb; "
        f"recipe {secs:.1f} s")

    if not reduced:
        rows += draft_row(binary, template, cache, work, threads, log, notes, draft_keys(parts))
    return rows


def draft_keys(parts):
    """Part "draft": the E. coli draft; part "drafts": the other genera's drafts."""
    return [d[0] for d in DRAFTS if (d[0] == "draft" and "draft" in parts) or (d[0] != "draft" and "drafts" in parts)]


def draft_row(binary, template, cache, work, threads, log, notes, keys=("draft",)):
    """The planted drafts' rows."""
    rows = []
    for key, label, *_ in (d for d in DRAFTS if d[0] in keys):
        rows += one_draft_row(binary, template, cache, work, threads, log, notes, key, label)
    return rows


def one_draft_row(binary, template, cache, work, threads, log, notes, key, label):
    rows = []
    t0 = time.monotonic()
    fasta, truth = cached_draft(cache, key)
    t_truth = time.monotonic() - t0
    seqs = dict(read_fasta(fasta))
    lengths = {n: len(s) for n, s in seqs.items()}
    profile, calls, summary, secs = run_recipe(binary, fasta, template, os.path.join(work, key), threads)
    called = called_masks(calls, lengths)
    listed = {c["name"] for c in summary.get("foreign_contigs", {}).get("contigs", [])}
    foreign = [f["name"] for f in truth["foreign"]]
    flagged = sum(n in listed for n in foreign)
    half = sum(called[n].mean() >= 0.5 for n in foreign)
    native = truth["native"]
    big = [n for n, L in native.items() if L >= 5000]
    small = [n for n, L in native.items() if L < 1000]
    big_called = sum(called[n].mean() >= 0.5 for n in big)
    big_listed = sum(n in listed for n in big)
    small_called = sum(called[n].any() for n in small)
    wrong = contradictions(calls, seqs, profile, summary)
    rows.append({"genome": f"{label} + 20 foreign contigs",
                 "truth": "planted contigs (10 GC-matched)", "note": note_of(notes, key),
                 "planted": (flagged, half, len(foreign)), "native_big": (big_called, big_listed, len(big)),
                 "native_small": (small_called, len(small)), "calls": len(calls),
                 "contradicting": len(wrong), "wrong": wrong[:5], "seconds": secs, "truth_seconds": t_truth,
                 "planted_detail": [(n, f["gc_matched"], n in listed, float(called[n].mean()))
                                    for n, f in zip(foreign, truth["foreign"])]})
    log(f"# {key}: {flagged}/20 foreign contigs listed, {half}/20 >= 50 % called; native >= 5 kb "
        f"called {big_called}/{len(big)}, listed {big_listed}; native < 1 kb with calls "
        f"{small_called}/{len(small)}; recipe {secs:.1f} s")
    return rows


def markdown(rows, template):
    out = [f"| genome ({template}) | truth | islands ≥ 50 % covered | core called | boundary error, median (kb) "
           "| planted contigs found (listed / ≥ 50 % called) | native contigs ≥ 5 kb ≥ 50 % called (listed) "
           "| native contigs < 1 kb with calls | calls contradicting their GC name | note |",
           "|---|---|---:|---:|---:|---:|---:|---:|---:|---|"]
    for r in rows:
        isl = f"{r['islands'][0]} / {r['islands'][1]}" if "islands" in r else "–"
        core = f"{100 * r['core_called']:.1f} %" if "core_called" in r else "–"
        planted = f"{r['planted'][0]} / {r['planted'][1]} of {r['planted'][2]}" if "planted" in r else "–"
        big = (f"{r['native_big'][0]} of {r['native_big'][2]} ({r['native_big'][1]})" if "native_big" in r
               else "–")
        small = f"{r['native_small'][0]} of {r['native_small'][1]}" if "native_small" in r else "–"
        out.append(f"| {r['genome']} | {r['truth']} | {isl} | {core} | {r.get('boundary_kb', '–')} | {planted} "
                   f"| {big} | {small} | {r['contradicting']} of {r['calls']} | {r['note']} |")
    return "\n".join(out) + "\n"


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--tidemark", default="build/tidemark", help="the tidemark binary")
    ap.add_argument("--template", default="gc-shift", help="islands template: built-in name or profile file")
    ap.add_argument("--cache", default=os.path.join(os.environ.get("TMPDIR", "/tmp"), "tidemark-island-panel"),
                    help="folder for the cached truth (genomes as plain FASTA, window states, chimera, draft)")
    ap.add_argument("--work", default=None, help="folder for the runs' outputs (default: CACHE/runs)")
    ap.add_argument("-t", "--threads", type=int, default=2)
    ap.add_argument("--reduced", action="store_true", help="K-12 against 536 and the chimeras only")
    ap.add_argument("--parts", default="comparative,chimera,draft,drafts",
                    help="comma-separated: comparative, chimera, draft (E. coli), drafts (other genera) "
                         "(default: all)")
    ap.add_argument("-o", "--output", default="-", help="Markdown table (default: stdout)")
    ap.add_argument("--json", help="all figures as JSON")
    a = ap.parse_args()
    template = a.template if not os.path.exists(a.template) else os.path.abspath(a.template)
    work = a.work or os.path.join(a.cache, "runs", re.sub(r"[^A-Za-z0-9_.-]", "_", os.path.basename(template)))
    t0 = time.monotonic()
    rows = panel(os.path.abspath(a.tidemark), template, a.cache, work, a.threads, a.reduced,
                 log=lambda s: print(s, file=sys.stderr, flush=True), parts=a.parts.split(","))
    table = markdown(rows, os.path.basename(template))
    print(f"# panel: {time.monotonic() - t0:.1f} s wall; tidemark fit + scan {run_recipe.cpu_seconds:.1f} s CPU",
          file=sys.stderr)
    if a.output == "-":
        sys.stdout.write(table)
    else:
        with open(a.output, "w") as f:
            f.write(table)
    if a.json:
        with open(a.json, "w") as f:
            json.dump(rows, f, indent=1, default=str)


if __name__ == "__main__":
    main()
