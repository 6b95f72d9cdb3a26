"""Oracle: `tidemark simulate` output against the profile it was drawn from (the published
cpg-island-2state tables), tiling of the truth BED, byte-identical reruns, line width, gaps, bounded memory."""

import json
import math
import os
import subprocess
import sys
import time

import numpy as np

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

PROFILE_FILE = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "data", "profiles",
                            "cpg-island-2state.json")
# The profile file's emission rows are Durbin, Eddy, Krogh & Mitchison (1998), Biological Sequence
# Analysis, section 3.1 (as cited inside the file); its switch probabilities are cited there too.
DURBIN = "cpg-island-2state.json: Durbin et al. (1998) section 3.1 tables, binomial sampling error"
BINOMIAL_Z = 5  # two-sided normal tail 5.7e-7 per cell; about 40 cells below -> false alarm < 3e-5
CODE = {ord("A"): 0, ord("C"): 1, ord("G"): 2, ord("T"): 3}


def profile_tables():
    with open(PROFILE_FILE, encoding="utf-8") as f:
        p = json.load(f)
    regions = [r["name"] for r in p["regions"]]
    states = {s["name"]: s for s in p["states"]}
    # cpg-island-2state has one state per region, so a region label is a state label.
    assert len(states) == len(regions)
    region_of = {s["name"]: s["region"] for s in p["states"]}
    emissions = {region_of[n]: np.array(s["emissions"], dtype=float) for n, s in states.items()}
    switch = {region_of[a]: {region_of[b]: v for b, v in row.items()} for a, row in p["transitions"].items()}
    return regions, emissions, switch


def codes_of(seq):
    """Base codes 0..3, 4 for N, as a numpy array."""
    arr = np.frombuffer(seq.encode("ascii"), dtype=np.uint8)
    out = np.full(arr.shape, 4, dtype=np.int64)
    for letter, code in CODE.items():
        out[arr == letter] = code
    return out


def labels_of(truth_rows, name, length, regions):
    """Per-base region index from the truth BED rows of one contig (-1 where not covered)."""
    lab = np.full(length, -1, dtype=np.int64)
    for chrom, start, end, region in truth_rows:
        if chrom == name:
            lab[int(start):int(end)] = regions.index(region)
    return lab


def tiles(rows, lengths, regions):
    """True when, per contig, the rows are in order, contiguous from 0 to the contig length,
    maximal (neighbours differ in region) and name only profile regions; and no other contig."""
    by_chrom = {}
    for r in rows:
        if len(r) != 4 or r[3] not in regions:
            return False, f"bad row {r}"
        by_chrom.setdefault(r[0], []).append((int(r[1]), int(r[2]), r[3]))
    if set(by_chrom) != set(lengths):
        return False, f"contigs {sorted(by_chrom)} vs FASTA {sorted(lengths)}"
    for chrom, segs in by_chrom.items():
        pos, prev = 0, None
        for b, e, name in segs:
            if b != pos or e <= b or name == prev:
                return False, f"{chrom}: segment {b}-{e} {name} after {pos} {prev}"
            pos, prev = e, name
        if pos != lengths[chrom]:
            return False, f"{chrom}: segments end at {pos}, contig length {lengths[chrom]}"
    return True, ""


def binomial_ok(count, n, p):
    if p == 0:
        return count == 0
    return abs(count - n * p) <= BINOMIAL_Z * math.sqrt(n * p * (1 - p))


def peak_hwm_kb(binary, args, cwd):
    """Peak resident memory (VmHWM) of one run, polled from /proc while it runs. getrusage's
    maxrss is no use here: Linux carries the forking parent's (this Python's) resident size over
    exec. VmHWM only grows, so the last value read before exit is the peak up to then, and the
    runs below are long enough (0.1 s and more) to be past their start-up allocations."""
    proc = subprocess.Popen([binary] + args, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    peak = 0
    while proc.poll() is None:
        try:
            with open(f"/proc/{proc.pid}/status", encoding="ascii") as f:
                for line in f:
                    if line.startswith("VmHWM:"):
                        peak = max(peak, int(line.split()[1]))
        except OSError:
            pass
        time.sleep(0.005)
    if proc.returncode != 0:
        raise tmtest.RunError(f"tidemark {' '.join(args)} exited with {proc.returncode}: {proc.stderr.read()}")
    return peak


def body(checks, tm, work):
    regions, emissions, switch = profile_tables()
    fa, bed = os.path.join(work, "s.fa"), os.path.join(work, "t.bed")
    tmtest.run(tm, ["simulate", "-p", "cpg-island-2state", "--lengths", "5000000", "--seed", "2024", "-o", fa,
                    "--truth", bed])
    records = tmtest.read_fasta(fa)
    rows = tmtest.read_bed(bed)
    lengths = {n: len(s) for n, s in records}
    checks.equal(lengths, {"sim1": 5_000_000}, "one 5 Mbp contig named sim1", "the --lengths request")
    ok, why = tiles(rows, lengths, regions)
    checks.check(ok, "truth BED tiles the contig with maximal segments", "its definition, checked in Python", why)

    seq = codes_of(records[0][1])
    lab = labels_of(rows, "sim1", len(seq), regions)
    checks.equal(int((seq == 4).sum()), 0, "no N without --gaps", "SimulateOptions default")

    # Region switches: from region r, each position's next state is a fresh draw from row r of the
    # transition matrix, so the number of switches out of r is Binomial(n_r, p) with n_r the
    # positions of r that have a successor (5 sd tolerance).
    prev, nxt = lab[:-1], lab[1:]
    for r, name in enumerate(regions):
        n = int((prev == r).sum())
        for s, other in enumerate(regions):
            if s == r:
                continue
            count = int(((prev == r) & (nxt == s)).sum())
            p = switch[name].get(other, 0.0)
            checks.check(binomial_ok(count, n, p), f"transitions {name} -> {other}", DURBIN,
                         f"{count} of {n}, expected {n * p:.1f}")

    # Emissions: the base at t, drawn in the state at t from the row of base t-1 (order 1), so
    # given its context the count of each base is Binomial(n_context, row probability).
    ctx, base, state = seq[:-1], seq[1:], lab[1:]
    for r, name in enumerate(regions):
        for c in range(4):
            sel = (state == r) & (ctx == c)
            n = int(sel.sum())
            counts = np.bincount(base[sel], minlength=4)
            row = emissions[name][c] / emissions[name][c].sum()
            bad = [b for b in range(4) if not binomial_ok(int(counts[b]), n, row[b])]
            checks.check(not bad, f"{name} emissions after {'ACGT'[c]} ({n} bases)", DURBIN,
                         f"counts {counts.tolist()}, expected {(n * row).round(1).tolist()}")

    # Same seed: byte-identical files, whatever the output names; --contigs/--length is the same
    # request as --lengths; another seed gives another genome.
    def files(tag, args):
        f, t = os.path.join(work, tag + ".fa"), os.path.join(work, tag + ".bed")
        tmtest.run(tm, ["simulate"] + args + ["-o", f, "--truth", t])
        with open(f, "rb") as a, open(t, "rb") as b:
            return a.read(), b.read()
    a = files("a", ["--lengths", "300000,300000", "--seed", "9", "--gaps", "0.01"])
    b = files("b", ["--contigs", "2", "--length", "300000", "--seed", "9", "--gaps", "0.01"])
    c = files("c", ["--lengths", "300000,300000", "--seed", "10", "--gaps", "0.01"])
    checks.check(a == b, "same seed: byte-identical FASTA and truth", "determinism requirement (issue 4)")
    checks.check(a[0] != c[0], "another seed: another sequence", "determinism requirement (issue 4)")
    stdout = tmtest.run(tm, ["simulate", "--lengths", "300000,300000", "--seed", "9", "--gaps", "0.01"])
    checks.check(stdout.encode() == a[0], "FASTA on stdout equals the -o file", "README: stdout unless -o")

    # Line width: every line but the last of a record has exactly W bases; same sequence.
    narrow = os.path.join(work, "w7.fa")
    tmtest.run(tm, ["simulate", "--lengths", "300000,300000", "--seed", "9", "--gaps", "0.01",
                    "--line-width", "7", "-o", narrow])
    with open(narrow, encoding="ascii") as f:
        lines = f.read().split("\n")
    widths_ok = True
    for i, line in enumerate(lines[:-1]):
        last_of_record = i + 1 >= len(lines) - 1 or lines[i + 1].startswith(">")
        if not line.startswith(">") and (len(line) > 7 or (len(line) != 7 and not last_of_record)):
            widths_ok = False
    checks.check(widths_ok and lines[-1] == "", "--line-width 7 wraps at 7 bases, final newline",
                 "FASTA layout (common practice)")
    wide = tmtest.read_fasta(os.path.join(work, "a.fa"))
    checks.check(tmtest.read_fasta(narrow) == wide, "line width does not change the sequence", "same seed")

    # Gaps: the fraction of N over n bases has mean f and, for the alternating renewal process of
    # geometric N runs (mean L) and known runs (mean M = L(1-f)/f), variance about
    # (M^2 var_N + L^2 var_M) / (L + M)^3 / n (renewal-reward central limit theorem); 5 sd.
    f_gap, L = 0.05, 200.0
    gap_fa, gap_bed = os.path.join(work, "g.fa"), os.path.join(work, "g.bed")
    tmtest.run(tm, ["simulate", "--lengths", "2000000", "--seed", "77", "--gaps", str(f_gap),
                    "--gap-length", str(int(L)), "-o", gap_fa, "--truth", gap_bed])
    gap_records = tmtest.read_fasta(gap_fa)
    gseq = gap_records[0][1]
    n = len(gseq)
    M = L * (1 - f_gap) / f_gap
    sd = math.sqrt((M * M * L * (L - 1) + L * L * M * (M - 1)) / (L + M) ** 3 / n)
    frac = gseq.count("N") / n
    checks.check(abs(frac - f_gap) <= 5 * sd, "fraction of N bases", "--gaps definition, renewal CLT",
                 f"{frac:.5f}, expected {f_gap} +- {sd:.5f}")
    ok, why = tiles(tmtest.read_bed(gap_bed), {gap_records[0][0]: n}, regions)
    checks.check(ok, "truth BED tiles the contig through gaps", "its definition (gaps keep their hidden region)", why)

    # Duration chains (regions[].min_length, include/tidemark/profile.hpp): simulate samples the
    # compiled model, so a region of min_length 40 yields no segment shorter than 40 except where
    # a contig end cuts it, and the truth names regions, not chain copies. Without the chain, a
    # stay probability of 0.95 would make about 1 - 0.95^39 = 87 % of the segments shorter.
    chain = {
        "format": "tidemark-profile/1", "name": "chain-test",
        "regions": [{"name": "hot", "report": True, "min_length": 40}, {"name": "cold", "report": False}],
        "states": [{"name": "h", "region": "hot", "order": 0, "emissions": [[0.1, 0.4, 0.4, 0.1]]},
                   {"name": "c", "region": "cold", "order": 0, "emissions": [[0.4, 0.1, 0.1, 0.4]]}],
        "initial": {"h": 0.5, "c": 0.5},
        "transitions": {"h": {"h": 0.95, "c": 0.05}, "c": {"c": 0.95, "h": 0.05}},
    }
    chain_profile, chain_bed = os.path.join(work, "chain.json"), os.path.join(work, "chain.bed")
    with open(chain_profile, "w", encoding="utf-8") as f:
        json.dump(chain, f)
    tmtest.run(tm, ["simulate", "-p", chain_profile, "--contigs", "20", "--length", "5000", "--seed", "4",
                    "-o", os.devnull, "--truth", chain_bed])
    chain_rows = tmtest.read_bed(chain_bed)
    inner_hot = [int(e) - int(b) for c, b, e, name in chain_rows if name == "hot" and int(b) > 0 and int(e) < 5000]
    ok, why = tiles(chain_rows, {f"sim{i}": 5000 for i in range(1, 21)}, ["hot", "cold"])
    checks.check(ok and len(inner_hot) > 100 and min(inner_hot) >= 40,
                 "min_length 40 region: no inner segment shorter than 40",
                 "regions[].min_length definition (profile.hpp)",
                 f"{len(inner_hot)} segments, shortest {min(inner_hot) if inner_hot else None}; {why}")

    # Streaming: 10x the length, same peak memory within 4 MiB. Holding the sequence, even at
    # 2 bits per base, would add 22 MiB between these two runs.
    args = ["-o", os.devnull, "--truth", os.devnull]
    small = peak_hwm_kb(tm, ["simulate", "--lengths", "10000000"] + args, work)
    large = peak_hwm_kb(tm, ["simulate", "--contigs", "4", "--length", "25000000"] + args, work)
    checks.check(small > 0 and large - small <= 4 * 1024, "memory does not grow with the length simulated",
                 "streaming requirement (issue 4)", f"peak {small} KiB for 10 Mbp, {large} KiB for 100 Mbp")


if __name__ == "__main__":
    tmtest.main("simulate against its profile", body)
