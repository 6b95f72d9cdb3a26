"""Records longer than one shard's share are split between shards (scan --emit-seams, then
scan --seams, then merge): the merged outputs must equal a single run of the same command byte
for byte; the split must follow the documented piece rule (re-implemented here); calls that
cross the seams between shards must exist (so the joining is exercised) and their GC content
must equal Python's count over the FASTA."""

import json
import os
import shutil
import subprocess

import numpy as np

import tmtest

# The per-base isochore model that was built in before window profiles: a 5-state model whose
# long records split into segments (window profiles never split).
ISOCHORE_PER_BASE = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "data", "profiles",
                                 "isochore-per-base.json")

SINGLE = "single run of the same command (merged shards must equal it byte for byte)"
PYTHON = "Python reading of the FASTA"
RULE = "piece rule of plan_shards re-implemented in Python (shard.hpp)"


def records_with_seam_islands(rng, lengths, segment):
    """AT-leaning background with CpG-rich stretches centred on segment boundaries (where one
    shard's piece may end and the next begin), plus a few elsewhere, N runs and lowercase."""
    records = []
    for i, n in enumerate(lengths):
        seq = rng.choice(list("ACGT"), size=n, p=[0.3, 0.2, 0.2, 0.3])
        centres = list(range(segment, n - 1000, segment)) + list(rng.integers(2000, n - 2000, size=3))
        for c in centres:
            width = int(rng.integers(600, 2400))
            lo, hi = max(0, c - width // 2), min(n, c + width // 2)
            seq[lo:hi] = rng.choice(list("ACGT"), size=hi - lo, p=[0.1, 0.4, 0.4, 0.1])
        if i == 0:
            seq[3 * segment - 40:3 * segment + 40] = "N"  # an unknown run across a boundary
        text = "".join(seq)
        if i == 1:
            text = text[:segment - 500] + text[segment - 500:segment + 500].lower() + text[segment + 500:]
        records.append((f"chr{i + 1}", text))
    return records




def expected_plan(lengths, n, segment):
    """{record: [(first, last, shard)]} for split records and {record: shard} for whole ones."""
    total = sum(lengths)
    share = -(-total // n)
    items, item_len = [], []
    for i, length in enumerate(lengths):
        if length > share and length > segment:
            k = -(-length // segment)
            m = min(k, -(-length // share))
            for p in range(m):
                first, last = p * k // m, (p + 1) * k // m
                items.append((i, first, last))
                item_len.append(min(length, last * segment) - first * segment)
        else:
            items.append((i, None, None))
            item_len.append(length)
    shard = tmtest.longest_first(item_len, n)
    pieces, whole = {}, {}
    for (i, first, last), s in zip(items, shard):
        if first is None:
            whole[i] = s
        else:
            pieces.setdefault(i, []).append((first, last, s))
    return pieces, whole






def outputs_of(scan_args, bgzip):
    bed = "calls.bed.gz" if bgzip else "calls.bed"
    return ["-o", bed, "--summary", "summary.json", "--report", "report.json", "--posteriors", "post",
            "--gff3", "calls.gff3", "-q"] + (["--bgzip"] if bgzip else []) + scan_args


def scenario(checks, binary, work, name, fasta, n, scan_args, regions, bgzip=False):
    base = os.path.join(work, name)
    words = outputs_of(scan_args, bgzip)
    tmtest.run_in(binary, os.path.join(base, "single"), ["scan", fasta] + words)
    for i in range(1, n + 1):  # step 1: seams only
        tmtest.run_in(binary, os.path.join(base, "seams"), ["scan", fasta, "--shard", f"{i}/{n}", "--emit-seams",
                                                    f"{i}.json", "-q"] + scan_args)
    seams = sum((["--seams", f"../seams/{i}.json"] for i in range(n, 0, -1)), [])
    for i in range(1, n + 1):  # step 2: every shard in its own folder, same words
        tmtest.run_in(binary, os.path.join(base, f"s{i}"), ["scan", fasta, "--shard", f"{i}/{n}"] + seams + words)
    bed = "calls.bed.gz" if bgzip else "calls.bed"
    args = ["merge", "-q", "--shard-summaries"] + [f"../s{i}/summary.json" for i in range(1, n + 1)]
    args += ["--shard-reports"] + [f"../s{i}/report.json" for i in range(1, n + 1)]
    args += ["--shard-beds"] + [f"../s{i}/{bed}" for i in range(1, n + 1)]
    args += ["--shard-posteriors"] + [f"../s{i}/post" for i in range(1, n + 1)]
    args += ["--shard-gff3"] + [f"../s{i}/calls.gff3" for i in range(1, n + 1)]
    args += ["-o", bed, "--summary", "summary.json", "--report", "report.json", "--posteriors", "post",
             "--gff3", "calls.gff3"] + (["--bgzip"] if bgzip else [])
    tmtest.run_in(binary, os.path.join(base, "merged"), args)
    single, merged = os.path.join(base, "single"), os.path.join(base, "merged")
    for f in sorted(os.listdir(single)):
        if f == "report.json":
            a = {k: v for k, v in tmtest.read_json(os.path.join(single, f)).items() if k != "resources"}
            b = {k: v for k, v in tmtest.read_json(os.path.join(merged, f)).items() if k != "resources"}
            checks.check(a == b, f"{name}: merged report equals the single run's apart from resources", SINGLE)
        else:
            checks.check(tmtest.read_bytes(os.path.join(single, f)) == tmtest.read_bytes(os.path.join(merged, f)),
                         f"{name}: merged {f} equals the single run's", SINGLE)
    return [tmtest.read_json(os.path.join(base, f"s{i}", "summary.json"))["shard"] for i in range(1, n + 1)]


def check_plan(checks, name, shards, lengths, n, segment):
    pieces, whole = expected_plan(lengths, n, segment)
    got_pieces, got_whole = {}, {}
    for s, doc in enumerate(shards):
        for c in doc["contigs"]:
            got_whole[c["input_index"]] = s
        for r in doc["shared"]:
            idx = [d["segment"] for d in r["done"]]
            got_pieces.setdefault(r["record"]["input_index"], set()).update((k, s) for k in idx)
    want = {i: {(k, s) for first, last, s in p for k in range(first, last)} for i, p in pieces.items()}
    checks.equal(got_whole, whole, f"{name}: whole records go to the planned shards", RULE)
    checks.equal(got_pieces, want, f"{name}: every segment of a split record is decoded once, by the planned shard",
                 RULE)
    return pieces


def check_seam_calls(checks, name, merged_bed, records, pieces, segment):
    """Calls that cross a boundary between two shards' pieces; their GC against Python."""
    seqs = dict(records)
    names = [r[0] for r in records]
    seams = {names[i]: [first * segment for first, _, _ in p[1:]] for i, p in pieces.items()}
    crossing, worst = 0, 0.0
    for row in tmtest.read_bed(merged_bed):
        chrom, start, end = row[0], int(row[1]), int(row[2])
        if any(start < b < end for b in seams.get(chrom, [])):
            crossing += 1
            s = seqs[chrom][start:end].upper()
            known = sum(s.count(b) for b in "ACGT")
            worst = max(worst, abs(float(row[8]) - (s.count("C") + s.count("G")) / known))
    checks.check(crossing >= 2, f"{name}: calls cross the seams between shards", PYTHON, f"{crossing} calls")
    checks.at_most(worst, 5e-5, f"{name}: GC of calls across seams (4 decimals in the BED)", PYTHON)


def fails(checks, binary, cwd, args, code, fragment, what):
    r = subprocess.run([binary] + args, cwd=cwd, capture_output=True, text=True)
    checks.check(r.returncode == code and fragment in r.stderr, what, "documented error contract",
                 f"exit {r.returncode}: {r.stderr.strip()[:200]}")


def body(checks, binary, work):
    rng = np.random.default_rng(20261201)
    segment = 65536  # --block 4096: 16 blocks, at least 64 Ki (decode.hpp)
    lengths = [700000, 455000, 30000, 90000, 12000]
    records = records_with_seam_islands(rng, lengths, segment)
    fasta = os.path.join(work, "genome.fa")
    tmtest.write_fasta(fasta, records)

    # 1. cpg-island with published island criteria (call compositions are joined across seams).
    shards = scenario(checks, binary, work, "cpg", fasta, 3, ["--block", "4096", "--island-criteria", "ggf1987"], None)
    pieces = check_plan(checks, "cpg", shards, lengths, 3, segment)
    checks.check(len(pieces) == 2, "cpg: the two long records are split", RULE, str(sorted(pieces)))
    check_seam_calls(checks, "cpg", os.path.join(work, "cpg", "merged", "calls.bed"), records, pieces, segment)

    # 2. More shards, browser BED, bgzip + tabix, merged gaps, two threads per shard.
    shards = scenario(checks, binary, work, "browser", fasta, 5,
                      ["--block", "4096", "--bed-style", "browser", "--merge-gap", "400", "--min-length", "80",
                       "-t", "2"], None, bgzip=True)
    check_plan(checks, "browser", shards, lengths, 5, segment)

    # 3. A profile of several states per region type, binned tracks (segments end on bins).
    bin_segment = 65600  # 65536 rounded up to a multiple of --bin 100
    shards = scenario(checks, binary, work, "isochore", fasta, 4,
                      ["-p", ISOCHORE_PER_BASE, "--block", "4096", "--bin", "100", "--posterior-digits", "2"], None)
    check_plan(checks, "isochore", shards, lengths, 4, bin_segment)

    # 4. Regions of the indexed file.
    regs = ["chr1:20001-690000", "chr2", "chr4"]
    reg_args = sum((["-r", r] for r in regs), [])
    shards = scenario(checks, binary, work, "regions", fasta, 3, ["--block", "4096"] + reg_args, None)
    check_plan(checks, "regions", shards, [670000, 455000, 90000], 3, segment)

    # 5. --whole-contigs: one step, no record split, and the merge still equals the single run.
    base = os.path.join(work, "whole")
    words = outputs_of(["--block", "4096"], False)
    tmtest.run_in(binary, os.path.join(base, "single"), ["scan", fasta] + words)
    for i in (1, 2):
        tmtest.run_in(binary, os.path.join(base, f"s{i}"), ["scan", fasta, "--shard", f"{i}/2", "--whole-contigs"] + words)
    tmtest.run_in(binary, os.path.join(base, "merged"),
           ["merge", "-q", "--shard-summaries", "../s1/summary.json", "../s2/summary.json", "--shard-beds",
            "../s1/calls.bed", "../s2/calls.bed", "-o", "calls.bed", "--summary", "summary.json"])
    for f in ("calls.bed", "summary.json"):
        checks.check(tmtest.read_bytes(os.path.join(base, "single", f)) == tmtest.read_bytes(os.path.join(base, "merged", f)),
                     f"whole: merged {f} equals the single run's", SINGLE)
    shared = [r for i in (1, 2) for r in tmtest.read_json(os.path.join(base, f"s{i}", "summary.json"))["shard"]["shared"]]
    checks.equal(shared, [], "whole: --whole-contigs shares no record", "documented option")

    # 6. Failures name the problem and write nothing.
    cpg = os.path.join(work, "cpg")
    fails(checks, binary, cpg, ["scan", fasta, "--shard", "1/3", "--block", "4096", "-o", "x.bed"], 2,
          "--emit-seams", "a shard with a shared record and no --seams is a usage error naming both steps")
    fails(checks, binary, cpg, ["scan", fasta, "--shard", "1/3", "--block", "4096", "--seams", "seams/1.json",
                                "--seams", "seams/3.json", "-o", "x.bed"], 1, "no seams for segments",
          "seams of one shard missing: the segments are named")
    fails(checks, binary, cpg, ["scan", fasta, "--shard", "1/3", "--block", "8192", "--seams", "seams/1.json",
                                "--seams", "seams/2.json", "--seams", "seams/3.json", "-o", "x.bed"], 1,
          "another run", "seams made with other options are refused")
    # The genome changed after step 1: refused by its modification time; and when the time is
    # put back, by the base checksum of the shard's own segments.
    changed = os.path.join(work, "changed.fa")
    shutil.copy2(fasta, changed)
    for i in (1, 2, 3):
        tmtest.run_in(binary, os.path.join(cpg, "changed"), ["scan", changed, "--shard", f"{i}/3", "--block", "4096",
                                                              "--emit-seams", f"{i}.json", "-q"])
    stat = os.stat(changed)
    with open(changed, "r+") as f:
        f.seek(len(">chr1\n") + 200000 // 60 * 61 + 7)  # a base of chr1, in the first piece
        old = f.read(1)
        f.seek(f.tell() - 1)
        f.write("C" if old != "C" else "G")
    all_seams = ["--seams", "changed/1.json", "--seams", "changed/2.json", "--seams", "changed/3.json"]
    owner = [i for i, sh in enumerate(shards, 1) for r in sh["shared"] if r["record"]["name"] == "chr1"
             and any(d["begin"] <= 200000 < d["end"] for d in r["done"])][0]
    fails(checks, binary, cpg, ["scan", changed, "--shard", f"{owner}/3", "--block", "4096", "-o", "x.bed"] + all_seams,
          1, "another run", "seams made before the genome changed are refused (modification time)")
    os.utime(changed, ns=(stat.st_atime_ns, stat.st_mtime_ns))
    fails(checks, binary, cpg, ["scan", changed, "--shard", f"{owner}/3", "--block", "4096", "-o", "x.bed"] + all_seams,
          1, "do not match this sequence", "changed bases under old seams are refused (checksum of the segment)")
    fails(checks, binary, cpg, ["scan", fasta, "--shard", "1/3", "--block", "4096", "--emit-seams", "y.json",
                                "-o", "x.bed"], 2, "writes only the seams", "--emit-seams with other outputs")
    checks.check(not os.path.exists(os.path.join(cpg, "x.bed")) and not os.path.exists(os.path.join(cpg, "y.json")),
                 "failed runs leave no output file", "documented error contract")
    merged = os.path.join(cpg, "merged")
    fails(checks, binary, merged, ["merge", "--shard-summaries", "../s1/summary.json", "../s2/summary.json",
                                   "../s3/summary.json", "-p", ISOCHORE_PER_BASE, "--summary", "z.json"], 1,
          "not the one the shards used", "merge refuses a profile other than the shards'")
    s2 = tmtest.read_json(os.path.join(cpg, "s2", "summary.json"))
    s2["shard"]["shared"] = s2["shard"]["shared"][:-1]
    with open(os.path.join(merged, "cut.json"), "w") as f:
        json.dump(s2, f)
    fails(checks, binary, merged, ["merge", "--shard-summaries", "../s1/summary.json", "cut.json",
                                   "../s3/summary.json", "--summary", "z.json"], 1, "in no shard",
          "a shard summary without its part of a shared record is refused")
    for what, edit, fragment in (
            ("a segment that does not continue the one before",
             lambda d: d["shard"]["shared"][0]["done"][0].__setitem__("begin", 5), "does not continue"),
            ("a call of a region the profile has not",
             lambda d: d["shard"]["shared"][0]["done"][0]["calls"].append([10, 20, 7, 0.9, 0.8, 10, 20, [3, 3, 2, 2, 0, 1], 10]),
             "unreported region")):
        doc = tmtest.read_json(os.path.join(cpg, "s2", "summary.json"))
        edit(doc)
        with open(os.path.join(merged, "edited.json"), "w") as f:
            json.dump(doc, f)
        fails(checks, binary, merged, ["merge", "--shard-summaries", "../s1/summary.json", "edited.json",
                                       "../s3/summary.json", "--summary", "z.json"], 1, fragment,
              f"an edited shard summary is refused: {what}")
    checks.check(not os.path.exists(os.path.join(merged, "z.json")), "failed merges leave no output file",
                 "documented error contract")

    # 7. Shards reading their share through the index.
    index_reading(checks, binary, work, rng)


def index_reading(checks, binary, work, rng):
    """Shards read their share through the .fai index when it lists every record; a file with
    empty records (which faidx leaves out) is streamed instead. Either way the merge equals the
    single run, and errors still name file and line."""
    def seq(n):
        return "".join(rng.choice(list("ACGT"), size=n))

    cases = {
        # CRLF line ends, descriptions, a lowercase stretch, records of unequal line widths.
        "crlf.fa": ("\r\n", [(">a first record", seq(3000), 60), (">b", seq(5003).lower(), 70), (">c x>y", seq(4100), 60),
                              (">d", seq(61), 60)]),
        # Empty records between and after others: the index cannot place them.
        "empty.fa": ("\n", [(">a", seq(3000), 60), (">e1", "", 60), (">b desc", seq(5000), 80), (">c", seq(2500), 60),
                             (">e2", "", 60)]),
    }
    for name, (eol, recs) in cases.items():
        path = os.path.join(work, name)
        with open(path, "w", newline="") as f:
            for header, s, width in recs:
                f.write(header + eol)
                for i in range(0, len(s), width):
                    f.write(s[i:i + width] + eol)
        base = os.path.join(work, "index-" + name)
        words = ["-o", "calls.bed", "--summary", "summary.json", "--posteriors", "post", "-q", "--min-length", "20"]
        tmtest.run_in(binary, os.path.join(base, "single"), ["scan", path] + words)
        for i in (1, 2, 3):
            subprocess.run([binary, "scan", path, "--shard", f"{i}/3"] + words, cwd=run_dir(base, f"s{i}"),
                           capture_output=True, text=True, check=True)
        tmtest.run_in(binary, os.path.join(base, "merged"),
               ["merge", "-q", "--shard-summaries"] + [f"../s{i}/summary.json" for i in (1, 2, 3)] +
               ["--shard-beds"] + [f"../s{i}/calls.bed" for i in (1, 2, 3)] +
               ["--shard-posteriors"] + [f"../s{i}/post" for i in (1, 2, 3)] +
               ["-o", "calls.bed", "--summary", "summary.json", "--posteriors", "post"])
        for f in ("calls.bed", "summary.json", "post.cpg_island.bedgraph"):
            checks.check(tmtest.read_bytes(os.path.join(base, "single", f)) == tmtest.read_bytes(os.path.join(base, "merged", f)),
                         f"{name}: merged {f} equals the single run's", SINGLE)
    # --region builds a missing index under a temporary name (concurrent shards are safe): the
    # index appears with every record, and nothing else is left.
    folder = run_dir(work, "index-build")
    fa = os.path.join(folder, "r.fa")
    shutil.copy(os.path.join(work, "crlf.fa"), fa)
    tmtest.run(binary, ["scan", fa, "-r", "b", "-o", "/dev/null", "-q"])
    lines = open(fa + ".fai").read().splitlines()
    checks.equal([l.split("\t")[:2] for l in lines], [["a", "3000"], ["b", "5003"], ["c", "4100"], ["d", "61"]],
                 "--region builds the .fai (names and lengths)", "the records written above")
    checks.equal(sorted(os.listdir(folder)), ["r.fa", "r.fa.fai"], "no temporary index file is left behind",
                 "atomic rename contract")

    # A bad byte: only the shard that decodes the record reads it, and names its line.
    path = os.path.join(work, "bad.fa")
    lines = [">p one", seq(60), seq(13), ">q", seq(60), seq(20) + "X" + seq(9), ">r", seq(60)]
    with open(path, "w") as f:
        f.write("\n".join(lines) + "\n")
    bad_line = lines.index(next(l for l in lines if "X" in l)) + 1
    codes = [subprocess.run([binary, "scan", path, "--shard", f"{i}/3", "-o", "/dev/null", "-q"],
                            capture_output=True, text=True) for i in (1, 2, 3)]
    failed = [r for r in codes if r.returncode != 0]
    checks.check(len(failed) == 1 and f"bad.fa:{bad_line}:" in failed[0].stderr and "column 21" in failed[0].stderr,
                 "a shard reading its share by index reports the bad byte with its line and column; the others "
                 "do not read that record", PYTHON, " | ".join(r.stderr.strip() for r in failed))


def run_dir(base, name):
    folder = os.path.join(base, name)
    os.makedirs(folder, exist_ok=True)
    return folder


if __name__ == "__main__":
    tmtest.main("records split between shards: seams, decoding and merge against a single run", body)
