"""tidemark's own bigWig writer against libBigWig and the format's description.

The reference file is written by libBigWig through pyBigWig (Debian python3-pybigwig) from the
bedGraph of the same run: the layout tidemark had while it wrote through libBigWig. pyBigWig reads
both files; the raw sections are also parsed here after the format description (Kent WJ, Zweig AS,
Barber G, Hinrichs AS, Karolchik D (2010) "BigWig and BigBed: enabling browsing of large
distributed datasets", Bioinformatics 26:2204-2207, supplementary data). The input has 300
sequences (a two-level sequence B+ tree), names whose sorted order is not the input order, runs
of N (zoom records start again after them), and 12-digit values (short intervals: several
hundred data blocks, a multi-level R-tree and zoom levels of many blocks)."""

import os
import random
import struct
import sys
import zlib

import numpy as np

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

PYBIGWIG = "pyBigWig 0.3 (libBigWig)"
FORMAT = "bigWig format, Kent et al. 2010 supplement"


def make_records(rng):
    """Two long sequences and 298 short ones; GC content drifting in stretches, N runs of 100 to
    3000 bases (posterior tracks leave them out) and short ones (kept)."""
    lengths = [700_000, 450_000] + [rng.randrange(1_500, 4_000) for _ in range(298)]
    records = []
    for k, n in enumerate(lengths):
        parts, size = [], 0
        while size < n:
            run = rng.randrange(200, 20_000)
            gc = rng.choice([0.35, 0.42, 0.55, 0.68])
            weights = [(1 - gc) / 2, gc / 2, gc / 2, (1 - gc) / 2]
            parts.append("".join(rng.choices("ACGT", weights, k=run)))
            size += run
            if rng.random() < 0.3:
                parts.append("N" * rng.choice([3, 99, 100, 101, rng.randrange(100, 3000)]))
                size += len(parts[-1])
        seq = "".join(parts)[:n]
        records.append((f"s{rng.randrange(10**6):06d}_{k}", seq))
    return records


class RawBigWig:
    """The sections of a bigWig file as the format description lays them out."""

    def __init__(self, path):
        self.d = tmtest.read_bytes(path)
        (self.magic, self.version, self.levels, self.tree_offset, self.data_offset, self.index_offset,
         _, _, _, self.summary_offset, self.buffer_size, _) = struct.unpack_from("<IHHQQQHHQQIQ", self.d, 0)
        self.zooms = [struct.unpack_from("<IIQQ", self.d, 64 + 24 * i) for i in range(self.levels)]
        self.summary = struct.unpack_from("<Qdddd", self.d, self.summary_offset)

    def sequence_tree(self):
        """(keys in the order the leaves hold them, {name: (number, length)})."""
        magic, block, key_size, value_size, count, _ = struct.unpack_from("<IIIIQQ", self.d, self.tree_offset)
        assert magic == 0x78CA8C91 and value_size == 8
        keys, items = [], {}

        def node(at):
            leaf, _, n = struct.unpack_from("<BBH", self.d, at)
            for i in range(n):
                base = at + 4 + i * (key_size + 8)
                key = self.d[base:base + key_size].rstrip(b"\0").decode()
                if leaf:
                    keys.append(key)
                    items[key] = struct.unpack_from("<II", self.d, base + key_size)
                else:
                    node(struct.unpack_from("<Q", self.d, base + key_size)[0])

        node(self.tree_offset + 32)
        assert len(items) == count
        return keys, items

    def leaves(self, index_offset):
        """Leaf entries of an R-tree in order: (seq0, start0, seq1, end1, offset, size)."""
        magic, _, count = struct.unpack_from("<IIQ", self.d, index_offset)
        assert magic == 0x2468ACE0
        out = []

        def node(at):
            leaf, _, n = struct.unpack_from("<BBH", self.d, at)
            for i in range(n):
                if leaf:
                    out.append(struct.unpack_from("<IIIIQQ", self.d, at + 4 + 32 * i))
                else:
                    node(struct.unpack_from("<IIIIQ", self.d, at + 4 + 24 * i)[4])

        node(index_offset + 48)
        assert len(out) == count
        return out

    def blocks(self, index_offset):
        """The uncompressed blocks in index order."""
        return [zlib.decompress(self.d[e[4]:e[4] + e[5]]) for e in self.leaves(index_offset)]

    def zoom_records(self, level):
        recs = []
        for raw in self.blocks(self.zooms[level][3]):
            recs += [struct.unpack_from("<IIIIffff", raw, 32 * i) for i in range(len(raw) // 32)]
        return recs


def stats_or_error(bw, name, kind, bins):
    """pyBigWig's zoom statistics, or the error it raises (on libBigWig's files a record without
    sums can make the variance negative; the reader then fails on the square root)."""
    try:
        return [None if x is None or np.isnan(x) else x for x in bw.stats(name, type=kind, nBins=bins)]
    except RuntimeError as e:
        return str(e)


def without_sums(records, reference):
    """Zoom records with the sum and sum of squares left out where libBigWig's record has neither:
    libBigWig 0.4.7 stores them only when the next record starts, so the last record of each block
    and of each level keeps 0 for both; tidemark's writer stores them (checked against numpy)."""
    return [r[:6] if q[6:] == (0.0, 0.0) else r for r, q in zip(records, reference)]


def sums_missing_in(reference):
    """(sequence number, start, end) of libBigWig's records without sums (see without_sums)."""
    return [q[:3] for q in reference if q[6:] == (0.0, 0.0) and q[5] > 0]


def check_zoom_sums(checks, records, text, order, what):
    """Each record's bases covered, sum and sum of squares from the bedGraph's intervals (values as
    float32), summed by numpy over the part of each interval inside the record."""
    prefix = {}
    for i, n in enumerate(order):
        iv = text.get(n, [])
        s = np.array([a for a, _, _ in iv], dtype=np.int64)
        e = np.array([b for _, b, _ in iv], dtype=np.int64)
        v = np.array([c for _, _, c in iv], dtype=np.float32).astype(np.float64)
        prefix[i] = (s, e, v)

    def up_to(i, x, power):
        """Sum over the sequence's bases below x of value**power (power 0: bases covered)."""
        s, e, v = prefix[i]
        w = v ** power
        whole = np.searchsorted(e, x, side="right")  # intervals ending at or before x
        total = np.concatenate(([0.0], np.cumsum((e - s) * w)))[whole]
        inside = whole < len(s)
        part = np.where(inside, np.clip(x - s[np.minimum(whole, len(s) - 1)], 0, None), 0)
        return total + part * np.where(inside, w[np.minimum(whole, len(s) - 1)], 0.0)

    rec = np.array([r[:4] for r in records], dtype=np.int64)
    got = np.array([r[6:] for r in records], dtype=np.float64)
    want = np.zeros((len(records), 3))
    for i in np.unique(rec[:, 0]):
        rows = rec[:, 0] == i
        for power in range(3):
            want[rows, power] = up_to(i, rec[rows, 2], power) - up_to(i, rec[rows, 1], power)
    checks.check(np.array_equal(want[:, 0], rec[:, 3]), f"{what}: bases covered per zoom record", "numpy")
    checks.check(np.allclose(got, want[:, 1:], rtol=1e-5, atol=1e-6),
                 f"{what}: sum and sum of squares of every zoom record, including each block's last",
                 "numpy", f"{len(records)} records, largest difference {np.abs(got - want[:, 1:]).max():.3g}")


def write_reference(text, order, lengths, path):
    """libBigWig writes the bedGraph's intervals, one call per sequence, as tidemark did before."""
    import pyBigWig

    ref = pyBigWig.open(path, "w")
    ref.addHeader([(n, lengths[n]) for n in order], maxZooms=10)
    for n in order:
        if n in text:
            iv = text[n]
            ref.addEntries([n] * len(iv), [s for s, _, _ in iv], ends=[e for _, e, _ in iv],
                           values=[v for _, _, v in iv])
    ref.close()


def edge_cases(checks, tm, work):
    """A record shorter than the first zoom level, one of unknown bases only (no intervals), a
    short one; default 3 digits."""
    import pyBigWig

    rng = random.Random(5)
    records = [("tiny", "ACGTA"), ("gap", "N" * 300), ("short", "".join(rng.choices("ACGT", k=900)))]
    lengths = {n: len(s) for n, s in records}
    order = [n for n, _ in records]
    fa = os.path.join(work, "edge.fa")
    tmtest.write_fasta(fa, records)
    tmtest.run(tm, ["scan", fa, "-q", "-o", "/dev/null", "--posteriors", "edge", "--track-format", "bigwig"], cwd=work)
    tmtest.run(tm, ["scan", fa, "-q", "-o", "/dev/null", "--posteriors", "edge"], cwd=work)
    ref_path = os.path.join(work, "edge-reference.bw")
    text = tmtest.read_bedgraph_intervals(os.path.join(work, "edge.cpg_island.bedgraph"))
    write_reference(text, order, lengths, ref_path)
    bw, rb = pyBigWig.open(os.path.join(work, "edge.cpg_island.bw")), pyBigWig.open(ref_path)
    checks.equal(bw.chroms(), rb.chroms(), "edge cases: sequence list equals libBigWig's", PYBIGWIG)
    checks.check([bw.intervals(n) for n in order] == [rb.intervals(n) for n in order],
                 "edge cases: intervals equal libBigWig's (none for the unknown-only record)", PYBIGWIG)
    checks.equal([bw.stats(n, nBins=3, type=t) for n in order for t in ("min", "max", "coverage")],
                 [rb.stats(n, nBins=3, type=t) for n in order for t in ("min", "max", "coverage")],
                 "edge cases: zoom minimum, maximum and coverage equal libBigWig's", PYBIGWIG)
    raw, raw_ref = RawBigWig(os.path.join(work, "edge.cpg_island.bw")), RawBigWig(ref_path)
    checks.equal([z[0] for z in raw.zooms], [z[0] for z in raw_ref.zooms],
                 "edge cases: zoom levels equal libBigWig's", FORMAT)
    recs, recs_ref = raw.zoom_records(0), raw_ref.zoom_records(0)
    checks.check(without_sums(recs, recs_ref) == without_sums(recs_ref, recs_ref),
                 "edge cases: zoom records equal libBigWig's (but for the sums it leaves out)", FORMAT,
                 f"{len(recs)} records")
    check_zoom_sums(checks, recs, text, order, "edge cases")
    bw.close()
    rb.close()

    only_gaps = os.path.join(work, "gaps.fa")
    tmtest.write_fasta(only_gaps, [("gap", "N" * 300)])
    tmtest.run(tm, ["scan", only_gaps, "-q", "-o", "/dev/null", "--posteriors", "gaps", "--track-format",
                    "bigwig"], cwd=work)
    bw = pyBigWig.open(os.path.join(work, "gaps.cpg_island.bw"))
    checks.equal((bw.chroms(), bw.intervals("gap"), bw.header()["nLevels"]), ({"gap": 300}, None, 0),
                 "a file without intervals: the sequence, no intervals, no zoom level", PYBIGWIG)
    bw.close()


def body(checks, tm, work):
    import pyBigWig

    rng = random.Random(25)
    records = make_records(rng)
    lengths = {n: len(s) for n, s in records}
    order = [n for n, _ in records]
    fa = os.path.join(work, "in.fa")
    tmtest.write_fasta(fa, records)
    for threads in ("1", "2"):
        tmtest.run(tm, ["scan", fa, "-q", "-t", threads, "-o", "/dev/null", "--posterior-digits", "12",
                        "--posteriors", f"t{threads}", "--track-format", "bigwig"], cwd=work)
    tmtest.run(tm, ["scan", fa, "-q", "-o", "/dev/null", "--posterior-digits", "12", "--posteriors", "text"],
               cwd=work)
    ours = os.path.join(work, "t1.cpg_island.bw")
    checks.check(tmtest.read_bytes(ours) == tmtest.read_bytes(os.path.join(work, "t2.cpg_island.bw")),
                 "bigWig bytes are the same with 1 and 2 threads", "the same run, byte for byte")

    # The reference: the bedGraph's intervals written by libBigWig, one call per sequence, as
    # tidemark wrote them before (maxZooms 10).
    text = tmtest.read_bedgraph_intervals(os.path.join(work, "text.cpg_island.bedgraph"))
    ref_path = os.path.join(work, "reference.bw")
    write_reference(text, order, lengths, ref_path)

    bw, rb = pyBigWig.open(ours), pyBigWig.open(ref_path)
    checks.check(list(bw.chroms().items()) == [(n, lengths[n]) for n in order],
                 "sequence list: every FASTA record with its length, in input order", PYBIGWIG,
                 f"{len(bw.chroms())} sequences")
    h, rh = bw.header(), rb.header()
    for field in ("version", "nLevels", "nBasesCovered", "sumData", "sumSquared"):
        checks.equal(h[field], rh[field], f"header {field} equals libBigWig's", PYBIGWIG)
    checks.check(h["nLevels"] >= 3, "several zoom levels", PYBIGWIG, str(h["nLevels"]))

    values = np.array([v for n in order for _, _, v in text.get(n, [])], dtype=np.float32)
    raw, raw_ref = RawBigWig(ours), RawBigWig(ref_path)
    checks.equal(raw.summary[1:3], (float(values.min()), float(values.max())),
                 "total summary minimum and maximum of the float32 values", FORMAT + "; numpy")
    checks.equal(raw.summary[0], sum(e - s for n in order for s, e, _ in text.get(n, [])),
                 "total summary bases covered", FORMAT + "; bedGraph")
    checks.equal((raw.magic, raw.buffer_size, struct.unpack_from("<I", raw.d, len(raw.d) - 4)[0]),
                 (0x888FFC26, raw_ref.buffer_size, 0x888FFC26),
                 "magic at both ends, uncompressed buffer size as libBigWig's", FORMAT)

    keys, items = raw.sequence_tree()
    checks.check(keys == sorted(order), "sequence B+ tree: leaf keys in sorted order (searchable)", FORMAT)
    checks.check(keys != order, "input order is not the sorted order (the test means something)", "test input")
    checks.check(items == {n: (i, lengths[n]) for i, n in enumerate(order)},
                 "sequence B+ tree: each name gives its place in the file order and its length", FORMAT)
    magic, block = struct.unpack_from("<II", raw.d, raw.tree_offset)[:2]
    checks.check(block < len(order), "sequence B+ tree has more than one level", FORMAT, f"block size {block}")

    # Every interval value, against the bedGraph and libBigWig's file.
    same_text = same_ref = True
    for n in order:
        got = bw.intervals(n) or ()
        want = tuple((s, e, float(np.float32(v))) for s, e, v in text.get(n, []))
        same_text &= tuple(got) == want
        same_ref &= got == (rb.intervals(n) or ())
    checks.check(same_text, "every interval equals the bedGraph's (values as float32)", PYBIGWIG + "; bedGraph")
    checks.check(same_ref, "every interval equals libBigWig's file", PYBIGWIG)
    data, data_ref = raw.blocks(raw.index_offset), raw_ref.blocks(raw_ref.index_offset)
    checks.check(data == data_ref, "uncompressed data blocks equal libBigWig's, block for block", FORMAT,
                 f"{len(data)} and {len(data_ref)} blocks")
    checks.check(len(data) > 64 * 2, "data index has more than one level", FORMAT, f"{len(data)} blocks")

    # Zoom levels: the records, and what readers compute from them.
    checks.equal([z[0] for z in raw.zooms], [z[0] for z in raw_ref.zooms], "zoom reduction levels", FORMAT)
    missing = []
    for level in range(min(raw.levels, raw_ref.levels)):
        recs, recs_ref = raw.zoom_records(level), raw_ref.zoom_records(level)
        checks.check(without_sums(recs, recs_ref) == without_sums(recs_ref, recs_ref),
                     f"zoom level {level} records equal libBigWig's (but for the sums it leaves out)", FORMAT,
                     f"{len(recs)} and {len(recs_ref)} records")
        check_zoom_sums(checks, recs, text, order, f"zoom level {level}")
        missing += sums_missing_in(recs_ref)
    checks.check(len(missing) >= raw_ref.levels, "libBigWig's file has records without sums (the test means "
                 "something)", "test input", f"{len(missing)} records")

    # What readers compute from the zoom levels: minimum, maximum and coverage as from libBigWig's
    # file everywhere; mean and standard deviation as from libBigWig's file for bins that hold
    # none of its records without sums, and as numpy's over whole sequences.
    same = {t: True for t in ("min", "max", "coverage", "mean", "std")}
    compared = differs = 0
    for n in order[:3] + order[-3:]:
        i, length = order.index(n), lengths[n]
        for bins in (1, 2, 3, 7, 10, 64, 100, 333, 1000, 4096):
            if bins > length:
                continue
            for t in ("min", "max", "coverage"):
                same[t] &= stats_or_error(bw, n, t, bins) == stats_or_error(rb, n, t, bins)
            # bin edges with a base of slack either side (the reader's integer division)
            clean = [not any(q == i and a < (b + 1) * length // bins + 1 and c > b * length // bins - 1
                             for q, a, c in missing) for b in range(bins)]
            for t in ("mean", "std"):
                ours, theirs = stats_or_error(bw, n, t, bins), stats_or_error(rb, n, t, bins)
                for b in range(bins):
                    if clean[b] and not isinstance(theirs, str):  # the error fails every bin
                        same[t] &= ours[b] == theirs[b]
                        compared += 1
                    else:
                        differs += 1
    for t, ok in same.items():
        checks.check(ok, f"zoom-level {t} over 1 to 4096 bins equals libBigWig's file", PYBIGWIG,
                     f"{compared} mean/std bins compared, {differs} left to numpy" if t == "mean" else "")
    checks.check(compared > 0 and differs > 0, "both kinds of bins occur (the test means something)", "test input")
    whole_mean = True
    for n in order[:3] + order[-3:]:
        iv = text.get(n, [])
        w = np.array([e - s for s, e, _ in iv], dtype=np.float64)
        v = np.array([x for _, _, x in iv], dtype=np.float32).astype(np.float64)
        mean = np.sum(w * v) / w.sum()
        whole_mean &= abs(bw.stats(n, type="mean", nBins=1)[0] - mean) <= 1e-5 * max(abs(mean), 1e-3)
    checks.check(whole_mean, "zoom-level mean over a whole sequence equals numpy's over its intervals", "numpy")
    bw.close()
    rb.close()

    edge_cases(checks, tm, work)


tmtest.main("tidemark's bigWig writer against libBigWig", body)
