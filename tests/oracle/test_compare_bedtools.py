"""Oracle: `tidemark compare` on random interval sets against the same quantities computed with
bedtools (Debian `bedtools`: merge, intersect -wo / -u / -f 0.5 -r), a general-purpose interval tool."""

import os
import random
import statistics
import subprocess
import sys

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

BEDTOOLS = "bedtools 2.30 (Debian)"
TRIALS = 12
TYPES = ["A", "B"]
SIZES = {"chr1": 200_000, "chr2": 150_000, "chr3": 80_000, "chrCallsOnly": 50_000, "chrTruthOnly": 40_000,
         "chrEmpty": 10_000}


def bedtools(args, stdin=None):
    proc = subprocess.run(["bedtools"] + args, input=stdin, capture_output=True, text=True, check=True)
    return proc.stdout


def random_intervals(rng, chroms, n):
    """n intervals on the given chroms with clustered starts (so that many overlap and some touch),
    lengths from 1 to about 3 kb, types A and B, in random order."""
    rows = []
    for _ in range(n):
        chrom = rng.choice(chroms)
        size = SIZES[chrom]
        if rows and rng.random() < 0.15:  # book-ended with an earlier interval
            prev = rng.choice(rows)
            if prev[0] == chrom and prev[2] < size:
                start = prev[2]
                rows.append((chrom, start, min(size, start + rng.randint(1, 500)), prev[3]))
                continue
        length = rng.choice([rng.randint(1, 50), rng.randint(50, 800), rng.randint(800, 3000)])
        start = rng.randint(0, size - length)
        rows.append((chrom, start, start + length, rng.choice(TYPES)))
    rng.shuffle(rows)
    return rows


def write_bed(path, rows, header=True):
    with open(path, "w", encoding="ascii") as f:
        if header:
            f.write("# random test intervals\n")
        for chrom, b, e, name in rows:
            f.write(f"{chrom}\t{b}\t{e}\t{name}\t0\t+\n")


def merged(rows, kind):
    """Rows of one type, sorted and merged by bedtools (touching intervals merge, as documented for
    bedtools merge -d 0), as BED3 text and as a list of (chrom, start, end)."""
    text = "".join(f"{c}\t{b}\t{e}\n" for c, b, e, name in rows if name == kind)
    if not text:
        return "", []
    srt = subprocess.run(["sort", "-k1,1", "-k2,2n"], input=text, capture_output=True, text=True, check=True).stdout
    out = bedtools(["merge", "-i", "stdin"], stdin=srt)
    return out, [(c, int(b), int(e)) for c, b, e in (line.split("\t") for line in out.splitlines())]


def total(spans):
    return sum(e - b for _, b, e in spans)


def bedtools_metrics(work, calls, truth, kind, genome_bases):
    c_text, c_spans = merged(calls, kind)
    t_text, t_spans = merged(truth, kind)
    cf, tf = os.path.join(work, f"c.{kind}.bed"), os.path.join(work, f"t.{kind}.bed")
    with open(cf, "w") as f:
        f.write(c_text)
    with open(tf, "w") as f:
        f.write(t_text)
    m = {"calls_merged": sum(1 for r in calls if r[3] == kind) - len(c_spans),
         "truth_merged": sum(1 for r in truth if r[3] == kind) - len(t_spans)}
    both = bool(c_spans) and bool(t_spans)
    # tp: the overlap column of intersect -wo summed over all pairs of merged intervals
    wo = bedtools(["intersect", "-a", cf, "-b", tf, "-wo"]) if both else ""
    tp = sum(int(line.split("\t")[-1]) for line in wo.splitlines())
    union_text = subprocess.run(["sort", "-k1,1", "-k2,2n"], input=c_text + t_text, capture_output=True, text=True,
                                check=True).stdout
    union = sum(int(e) - int(b) for _, b, e in (line.split("\t") for line in
                                                 bedtools(["merge", "-i", "stdin"], stdin=union_text).splitlines())) \
        if union_text else 0
    m.update(tp=tp, fp=total(c_spans) - tp, fn=total(t_spans) - tp, tn=genome_bases - union)

    def count(args):
        return len(bedtools(["intersect"] + args).splitlines()) if both else 0
    m["truth"] = len(t_spans)
    m["calls"] = len(c_spans)
    m["truth_overlapped"] = count(["-u", "-a", tf, "-b", cf])
    m["truth_reciprocal50"] = count(["-u", "-f", "0.5", "-r", "-a", tf, "-b", cf])
    m["calls_overlapping"] = count(["-u", "-a", cf, "-b", tf])
    m["calls_reciprocal50"] = count(["-u", "-f", "0.5", "-r", "-a", cf, "-b", tf])
    pairs = bedtools(["intersect", "-f", "0.5", "-r", "-wa", "-wb", "-a", tf, "-b", cf]).splitlines() if both else []
    starts = [abs(int(p.split("\t")[4]) - int(p.split("\t")[1])) for p in pairs]
    ends = [abs(int(p.split("\t")[5]) - int(p.split("\t")[2])) for p in pairs]
    m["pairs"] = len(pairs)
    m["median_abs_start_offset"] = statistics.median(starts) if starts else None
    m["median_abs_end_offset"] = statistics.median(ends) if ends else None
    return m


def body(checks, tm, work):
    sizes = os.path.join(work, "genome.sizes")
    with open(sizes, "w") as f:
        for name, n in SIZES.items():
            f.write(f"{name}\t{n}\n")
    genome_bases = sum(SIZES.values())
    mismatches = []
    compared = 0
    for trial in range(TRIALS):
        rng = random.Random(1000 + trial)
        calls = random_intervals(rng, ["chr1", "chr2", "chr3", "chrCallsOnly"], rng.randint(50, 400))
        truth = random_intervals(rng, ["chr1", "chr2", "chr3", "chrTruthOnly"], rng.randint(50, 400))
        cf, tf, jf = (os.path.join(work, f"{x}{trial}") for x in ("calls.bed", "truth.bed", "out.json"))
        write_bed(cf, calls)
        write_bed(tf, truth, header=trial % 2 == 0)
        tmtest.run(tm, ["compare", cf, tf, "--genome", sizes, "--json", jf])
        got = tmtest.read_json(jf)
        by_type = {t["type"]: t for t in got["types"]}
        merged_calls = merged_truth = 0
        for kind in TYPES:
            want = bedtools_metrics(work, calls, truth, kind, genome_bases)
            merged_calls += want["calls_merged"]
            merged_truth += want["truth_merged"]
            t = by_type.get(kind)
            if t is None:
                mismatches.append(f"trial {trial}: type {kind} missing")
                continue
            pairs = {f"base.{k}": (t["base"][k], want[k]) for k in ("tp", "fp", "fn", "tn")}
            for k in ("truth", "calls", "truth_overlapped", "truth_reciprocal50", "calls_overlapping",
                      "calls_reciprocal50", "median_abs_start_offset", "median_abs_end_offset"):
                pairs[f"intervals.{k}"] = (t["intervals"][k], want[k])
            pairs["intervals.matched_pairs"] = (t["intervals"]["matched_pairs"], want["pairs"])
            for name, (g, w) in pairs.items():
                compared += 1
                if g != w:
                    mismatches.append(f"trial {trial} type {kind} {name}: tidemark {g}, bedtools {w}")
            # The ratios follow from the counts by their documented formulas.
            tp, fp, fn = want["tp"], want["fp"], want["fn"]
            for name, value in (("precision", tp / (tp + fp)), ("recall", tp / (tp + fn)),
                                ("f1", 2 * tp / (2 * tp + fp + fn)), ("jaccard", tp / (tp + fp + fn)),
                                ("accuracy", (tp + want["tn"]) / genome_bases)):
                compared += 1
                if abs(t["base"][name] - value) > 1e-12:
                    mismatches.append(f"trial {trial} type {kind} {name}: tidemark {t['base'][name]}, expected {value}")
        for side, want in (("calls", merged_calls), ("truth", merged_truth)):
            compared += 1
            if got[side]["merged"] != want:
                mismatches.append(f"trial {trial}: {side} merged {got[side]['merged']}, bedtools {want}")
    checks.check(not mismatches, f"{compared} base and interval numbers over {TRIALS} random trials",
                 f"{BEDTOOLS} merge + intersect -wo/-u/-f 0.5 -r", "; ".join(mismatches[:5]))

    # The same sets folded into one type with --name equal bedtools on all intervals at once.
    rng = random.Random(7)
    calls = random_intervals(rng, ["chr1", "chr2"], 300)
    truth = random_intervals(rng, ["chr1", "chr3"], 300)
    cf, tf, jf = (os.path.join(work, x) for x in ("n.calls.bed", "n.truth.bed", "n.json"))
    write_bed(cf, calls)
    write_bed(tf, truth)
    tmtest.run(tm, ["compare", cf, tf, "--name", "any", "--genome", sizes, "--json", jf])
    got = tmtest.read_json(jf)["types"]
    want = bedtools_metrics(work, [r[:3] + ("any",) for r in calls], [r[:3] + ("any",) for r in truth], "any",
                            genome_bases)
    checks.check(len(got) == 1 and all(got[0]["base"][k] == want[k] for k in ("tp", "fp", "fn", "tn")),
                 "--name folds all types into one", f"{BEDTOOLS} on the whole files",
                 f"tidemark {got[0]['base'] if got else None}, bedtools {want}")


if __name__ == "__main__":
    tmtest.main("compare against bedtools", body)
