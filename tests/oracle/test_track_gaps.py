"""Unknown stretches in posterior tracks and calls: runs of at least 100 unknown bases (N) are
left out of bedGraph and bigWig tracks (no data), shorter runs keep their values; calls never
overlap such a run (a region on each side of one is its own call), while shorter runs stay inside
calls. The gaps are found by Python
in the FASTA; pyBigWig (Debian python3-pybigwig) reads the bigWig back; numpy recomputes bin means
over the bases outside gaps. Gaps are planted at and across the segment boundaries where a sharded
run splits a record between shards, and the merged shard outputs must equal a single run byte for
byte."""

import os
import sys

import numpy as np

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

GAP = 100  # track_gap_min_length (track.hpp), as README states it
SEGMENT = 1 << 16  # with --block 1024 a segment is 64 Ki bases (decode.cpp choose_segment)
PYTHON = "N runs counted by Python in the FASTA"
SINGLE = "single run of the same command (merged shards must equal it byte for byte)"


def planted_records(rng, p=(0.3, 0.2, 0.2, 0.3)):
    n = 5 * SEGMENT + 1234
    seq = rng.choice(list("ACGT"), size=n, p=list(p))
    b = SEGMENT
    # Segment boundaries are multiples of b; a sharded run splits chrA at some of them, and each
    # shard sees only its pieces' bases plus some context, so runs that touch or cross the
    # boundaries are the cases where a shard could misjudge a run's length.
    for lo, hi in [(0, 120),                  # at the start
                   (b - 36, b + 114),         # 150 across a boundary: left out
                   (b + 300, b + 399),        # 99: kept
                   (2 * b - 50, 2 * b + 20),  # 70 across a boundary: kept
                   (3 * b, 3 * b + 100),      # 100 starting at a boundary: left out
                   (4 * b - 200, 4 * b - 100),  # 100 ending 100 before a boundary: left out
                   (4 * b - 30, 4 * b + 30),  # 60 across a boundary: kept
                   (4 * b + 160, 4 * b + 260),  # 100 just after the boundary: left out
                   (5 * b - 100, 5 * b),      # 100 ending at a boundary: left out
                   (5 * b + 1, 5 * b + 60),   # short, just after a boundary: kept
                   (n - 150, n)]:             # at the end
        seq[lo:hi] = "N"
    small = rng.choice(list("ACGT"), size=5000)
    small[1000:1100] = "N"
    small[2000:2099] = "N"
    return [("chrA", "".join(seq)), ("chrB", "".join(small))]


def gap_mask(seq):
    """True where a base lies in a run of at least GAP unknown bases."""
    unknown = np.frombuffer(seq.encode(), dtype=np.uint8) == ord("N")
    mask = np.zeros(len(seq), dtype=bool)
    i = 0
    while i < len(seq):
        if not unknown[i]:
            i += 1
            continue
        j = i
        while j < len(seq) and unknown[j]:
            j += 1
        if j - i >= GAP:
            mask[i:j] = True
        i = j
    return mask


def sharded(checks, tm, work, fa, name, n, scan_args, outputs, bed=None):
    """Step 1 (seams), step 2 and merge of n shards (and of their BED `bed` when given); returns
    the merged folder."""
    base = os.path.join(work, name)
    for i in range(1, n + 1):
        tmtest.run_in(tm, os.path.join(base, "seams"),
                      ["scan", fa, "--shard", f"{i}/{n}", "--emit-seams", f"{i}.json", "-q"] + scan_args)
    seams = sum((["--seams", f"../seams/{i}.json"] for i in range(1, n + 1)), [])
    for i in range(1, n + 1):
        tmtest.run_in(tm, os.path.join(base, f"s{i}"), ["scan", fa, "--shard", f"{i}/{n}"] + seams + scan_args + outputs)
    merged = ["merge", "-q", "--shard-summaries"] + [f"../s{i}/summary.json" for i in range(1, n + 1)]
    merged += ["--shard-posteriors"] + [f"../s{i}/post" for i in range(1, n + 1)]
    merged += ["--summary", "summary.json", "--posteriors", "post"]
    if bed:
        merged += ["--shard-beds"] + [f"../s{i}/{bed}" for i in range(1, n + 1)] + ["-o", bed]
    tmtest.run_in(tm, os.path.join(base, "merged"), merged)
    shared = sum(len(tmtest.read_json(os.path.join(base, f"s{i}", "summary.json"))["shard"]["shared"])
                 for i in range(1, n + 1))
    checks.check(shared > 0, f"{name}: chrA is split between shards (the seams are exercised)", "shard plan")
    return os.path.join(base, "merged")


def body(checks, tm, work):
    rng = np.random.default_rng(15)
    records = planted_records(rng)
    fa = os.path.join(work, "gaps.fa")
    tmtest.write_fasta(fa, records)
    lengths = {name: len(seq) for name, seq in records}
    masks = {name: gap_mask(seq) for name, seq in records}

    # 1. Per-base track: exactly the bases outside long N runs are covered.
    common = ["--block", "1024", "-q", "-o", "/dev/null"]
    tmtest.run(tm, ["scan", fa] + common + ["--posteriors", "fine", "--posterior-digits", "12", "--summary", "s.json"],
               cwd=work)
    fine = tmtest.read_bedgraph(os.path.join(work, "fine.cpg_island.bedgraph"), lengths)
    for name, seq in records:
        covered = ~np.isnan(fine[name])
        checks.check(np.array_equal(covered, ~masks[name]), f"{name}: bedGraph covers every base but the long N runs",
                     PYTHON, f"{int((covered == masks[name]).sum())} bases differ")
    for lo, hi in [(SEGMENT + 300, SEGMENT + 399), (2 * SEGMENT - 50, 2 * SEGMENT + 20)]:
        checks.check(not np.isnan(fine["chrA"][lo:hi]).any(), f"a run of {hi - lo} N keeps its posteriors", PYTHON)

    # 2. Runs do not join across a gap: each line's interval lies between two gaps.
    lines = [l.split("\t") for l in open(os.path.join(work, "fine.cpg_island.bedgraph"))]
    crossing = [l for l in lines if masks[l[0]][int(l[1]):int(l[2])].any()]
    checks.equal(crossing, [], "no bedGraph line spans a long N run", PYTHON)

    # 3. bigWig: pyBigWig reads the same intervals, and no data inside the gaps.
    tmtest.run(tm, ["scan", fa] + common + ["--posteriors", "fine", "--posterior-digits", "12", "--track-format",
                                            "bigwig"], cwd=work)
    import pyBigWig
    bw = pyBigWig.open(os.path.join(work, "fine.cpg_island.bw"))
    for name, _ in records:
        spans = [(s, e) for s, e, _ in bw.intervals(name)]
        want = [(int(l[1]), int(l[2])) for l in lines if l[0] == name]
        checks.check(spans == want, f"{name}: bigWig intervals equal the bedGraph's", "pyBigWig 0.3",
                     f"{len(spans)} and {len(want)} intervals")
        lo = int(np.argmax(masks[name]))
        checks.check(bw.intervals(name, lo, lo + 1) in (None, ()), f"{name}: pyBigWig finds no data in a gap",
                     "pyBigWig 0.3")
    bw.close()

    # 4. --bin 100: a bin's value is the mean over its bases outside long gaps (numpy); bins wholly
    # inside gaps are left out.
    tmtest.run(tm, ["scan", fa] + common + ["--posteriors", "binned", "--bin", "100", "--posterior-digits", "6"],
               cwd=work)
    binned = tmtest.read_bedgraph(os.path.join(work, "binned.cpg_island.bedgraph"), lengths)
    for name, n in lengths.items():
        worst, wrong_presence = 0.0, 0
        for s in range(0, n, 100):
            e = min(n, s + 100)
            inside = ~masks[name][s:e]
            present = not np.isnan(binned[name][s])
            if present != inside.any():
                wrong_presence += 1
            elif present:
                worst = max(worst, abs(binned[name][s] - fine[name][s:e][inside].mean()))
        checks.equal(wrong_presence, 0, f"{name}: --bin 100 leaves out exactly the bins wholly inside gaps", PYTHON)
        checks.at_most(worst, 0.5e-6 + 1e-11, f"{name}: --bin 100 values are numpy means outside gaps", "numpy")

    # 5. Sharded runs that split chrA at the planted boundaries write what a single run writes.
    for fmt_args, name in [([], "bedgraph"), (["--bin", "100"], "bin100"), (["--track-format", "bigwig"], "bigwig")]:
        scan_args = ["--block", "1024"] + [a for a in fmt_args if a not in ("--track-format", "bigwig")]
        outputs = ["--summary", "summary.json", "--posteriors", "post", "-q", "-o", "/dev/null"]
        outputs += [a for a in fmt_args if a in ("--track-format", "bigwig")]
        tmtest.run_in(tm, os.path.join(work, name, "single"), ["scan", fa] + scan_args + outputs)
        merged = sharded(checks, tm, work, fa, name, 3, scan_args, outputs)
        suffix = ".bw" if "bigwig" in fmt_args else ".bedgraph"
        f = "post.cpg_island" + suffix
        checks.check(tmtest.read_bytes(os.path.join(work, name, "single", f)) ==
                     tmtest.read_bytes(os.path.join(merged, f)), f"{name}: merged {f} equals the single run's", SINGLE)

    # 6. Calls: an island-like chrA (C and G 0.35 each, CpG not depleted) is called nearly whole
    # by the CpG-island profile, so calls meet every planted gap. No call overlaps a long run,
    # short runs stay inside calls, and threads and shards call exactly what one run calls.
    calls_fa = os.path.join(work, "island.fa")
    island = planted_records(np.random.default_rng(16), p=(0.15, 0.35, 0.35, 0.15))
    tmtest.write_fasta(calls_fa, island)
    island_masks = {name: gap_mask(seq) for name, seq in island}
    scan_args = ["--block", "1024"]
    outputs = ["--summary", "summary.json", "--posteriors", "post", "-q", "-o", "calls.bed"]
    single = os.path.join(work, "calls", "single")
    tmtest.run_in(tm, single, ["scan", calls_fa, "-t", "1"] + scan_args + outputs)
    calls = [(r[0], int(r[1]), int(r[2])) for r in tmtest.read_bed(os.path.join(single, "calls.bed"))]
    chr_a = [(b, e) for name, b, e in calls if name == "chrA"]
    checks.check(len(chr_a) >= 6, "island-like chrA is called between its gaps", PYTHON, f"{len(chr_a)} calls")
    over = [(name, b, e) for name, b, e in calls if island_masks[name][b:e].any()]
    checks.equal(over, [], "no call overlaps a run of >= 100 N", PYTHON)
    for lo, hi in [(SEGMENT + 300, SEGMENT + 399), (2 * SEGMENT - 50, 2 * SEGMENT + 20)]:
        checks.check(any(b <= lo and hi <= e for b, e in chr_a), f"a run of {hi - lo} N stays inside a call",
                     PYTHON)
    for lo, hi in [(SEGMENT - 36, SEGMENT + 114), (3 * SEGMENT, 3 * SEGMENT + 100)]:
        checks.check(any(e == lo for _, e in chr_a) and any(b == hi for b, _ in chr_a),
                     f"the gap {lo}-{hi} ends one call and starts the next", PYTHON)
    two = os.path.join(work, "calls", "t2")
    tmtest.run_in(tm, two, ["scan", calls_fa, "-t", "2"] + scan_args + outputs)
    for f in ["calls.bed", "summary.json"]:
        checks.check(tmtest.read_bytes(os.path.join(single, f)) == tmtest.read_bytes(os.path.join(two, f)),
                     f"calls across gaps: --threads 2 writes the same {f}", SINGLE)
    merged = sharded(checks, tm, work, calls_fa, "calls-shards", 3, scan_args, outputs, bed="calls.bed")
    for f in ["calls.bed", "summary.json"]:
        checks.check(tmtest.read_bytes(os.path.join(single, f)) == tmtest.read_bytes(os.path.join(merged, f)),
                     f"calls across gaps: merged {f} equals the single run's", SINGLE)


if __name__ == "__main__":
    tmtest.main("posterior tracks and calls leave out long unknown runs", body)
