"""Browser tracks checked with independent readers: pyBigWig (Debian python3-pybigwig) reads the
bigWig back; the tabix command (Debian tabix, htslib) queries bgzip+tabix outputs; bedtools
(Debian bedtools) sorts and merges the BED; genometools' gt gff3validator (Debian genometools)
validates the GFF3; numpy recomputes binned means. The plotting scripts run headless."""

import os
import random
import struct
import subprocess
import sys

import numpy as np

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

REPO = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
DEMO = os.path.join(REPO, "data", "demo", "demo.fa.gz")


def sh(args, cwd):
    return subprocess.run(args, cwd=cwd, capture_output=True, text=True)


def png_size(path):
    with open(path, "rb") as f:
        head = f.read(24)
    if head[:8] != b"\x89PNG\r\n\x1a\n":
        return None
    return struct.unpack(">II", head[16:24])


def long_n_runs(seq, at_least=100):
    """True where a base lies in a run of at least 100 N (track_gap_min_length, README)."""
    mask = np.zeros(len(seq), dtype=bool)
    i = 0
    while i < len(seq):
        j = i
        while j < len(seq) and seq[j] == "N":
            j += 1
        if j - i >= at_least:
            mask[i:j] = True
        i = max(j, i + 1)
    return mask


def body(checks, tm, work):
    records = tmtest.read_fasta(DEMO)
    lengths = {n: len(s) for n, s in records}
    fa = os.path.join(work, "demo.fa")
    tmtest.write_fasta(fa, records)

    # 1. bedGraph and bigWig of the same run; pyBigWig reads the bigWig independently.
    tmtest.run(tm, ["scan", fa, "-q", "-o", "calls.bed", "--posteriors", "p", "--bed-style", "browser",
                    "--gff3", "calls.gff3", "--chrom-sizes", "sizes.txt", "--report", "report.json"], cwd=work)
    tmtest.run(tm, ["scan", fa, "-q", "-o", "/dev/null", "--posteriors", "p", "--track-format", "bigwig"], cwd=work)
    import pyBigWig
    bw = pyBigWig.open(os.path.join(work, "p.cpg_island.bw"))
    checks.equal(bw.chroms(), lengths, "bigWig sequence list equals the FASTA lengths", "pyBigWig 0.3")
    bedgraph = {}
    with open(os.path.join(work, "p.cpg_island.bedgraph")) as f:
        for line in f:
            c, s, e, v = line.split("\t")
            bedgraph.setdefault(c, []).append((int(s), int(e), float(v)))
    for chrom in lengths:
        got = bw.intervals(chrom)
        want = bedgraph[chrom]
        same_spans = [(s, e) for s, e, _ in got] == [(s, e) for s, e, _ in want]
        checks.check(same_spans, f"bigWig intervals of {chrom} equal the bedGraph's", "pyBigWig 0.3")
        worst = max(abs(a[2] - b[2]) for a, b in zip(got, want))
        checks.at_most(worst, 0.5e-3, f"bigWig values of {chrom} within the 3-digit quantisation", "pyBigWig 0.3")
    bw.close()

    # 2. bedGraph tiles each contig but its runs of >= 100 N (no data; README), sorted and without
    # overlaps (read_bedgraph raises otherwise).
    gaps = {n: long_n_runs(s) for n, s in records}
    per_base = tmtest.read_bedgraph(os.path.join(work, "p.cpg_island.bedgraph"), lengths)
    for chrom, v in per_base.items():
        checks.check(np.array_equal(np.isnan(v), gaps[chrom]), f"bedGraph tiles {chrom} but its long N runs",
                     "definition of a tiling; N runs counted in Python")

    # 3. --bin: each value is the mean of the per-base posteriors over its bin (numpy).
    tmtest.run(tm, ["scan", fa, "-q", "-o", "/dev/null", "--posteriors", "fine", "--posterior-digits", "12"], cwd=work)
    tmtest.run(tm, ["scan", fa, "-q", "-o", "/dev/null", "--posteriors", "binned", "--bin", "100"], cwd=work)
    fine = tmtest.read_bedgraph(os.path.join(work, "fine.cpg_island.bedgraph"), lengths)
    binned = tmtest.read_bedgraph(os.path.join(work, "binned.cpg_island.bedgraph"), lengths)
    for chrom, n in lengths.items():
        # Bins wholly inside long N runs have no value; the others the mean outside them.
        starts = np.array([i for i in range(0, n, 100) if not gaps[chrom][i:i + 100].all()])
        means = np.array([np.nanmean(fine[chrom][i:i + 100]) for i in starts])
        worst = np.abs(binned[chrom][starts] - means).max()
        checks.at_most(worst, 0.5e-3 + 1e-12, f"--bin 100 values of {chrom} equal numpy bin means", "numpy")
        constant = all(np.all(binned[chrom][s:min(s + 100, n)] == binned[chrom][s]) for s in starts)
        checks.check(constant, f"--bin 100 values of {chrom} are constant within bins", "definition of binning")

    # 4. bgzip + tabix: the tabix command returns exactly the calls overlapping each query.
    tmtest.run(tm, ["scan", fa, "-q", "-o", "calls.bed.gz", "--bgzip", "--bed-style", "browser",
                    "--posteriors", "z"], cwd=work)
    calls = [r for r in tmtest.read_bed(os.path.join(work, "calls.bed")) if not r[0].startswith("track")]
    rng = random.Random(7)
    for _ in range(12):
        chrom = rng.choice(sorted(lengths))
        a = rng.randrange(0, lengths[chrom] - 1)
        b = rng.randrange(a + 1, min(lengths[chrom], a + 40000) + 1)
        out = sh(["tabix", "calls.bed.gz", f"{chrom}:{a + 1}-{b}"], work)
        got = [line.split("\t") for line in out.stdout.splitlines()]
        want = [r for r in calls if r[0] == chrom and int(r[1]) < b and int(r[2]) > a]
        checks.check(out.returncode == 0 and got == want, f"tabix {chrom}:{a + 1}-{b} returns the overlapping calls",
                     "tabix (htslib) command", f"got {len(got)}, expected {len(want)}")
        gb = sh(["tabix", "z.cpg_island.bedgraph.gz", f"{chrom}:{a + 1}-{b}"], work)
        covered = sum(min(int(l.split('\t')[2]), b) - max(int(l.split('\t')[1]), a) for l in gb.stdout.splitlines())
        checks.equal(covered, b - a - int(gaps[chrom][a:b].sum()),
                     f"tabix bedGraph query {chrom}:{a + 1}-{b} covers the query but long N runs exactly",
                     "tabix (htslib) command")

    # 5. bedtools accepts the BED unchanged: sort keeps the order, merge finds no overlaps.
    srt = sh(["bedtools", "sort", "-i", "calls.bed"], work)
    data = [l for l in open(os.path.join(work, "calls.bed")).read().splitlines() if not l.startswith(("#", "track"))]
    checks.equal(srt.stdout.splitlines(), data, "bedtools sort leaves the calls as they are", "bedtools")
    mrg = sh(["bedtools", "merge", "-i", "calls.bed"], work)
    checks.equal([l.split("\t") for l in mrg.stdout.splitlines()], [r[:3] for r in calls],
                 "bedtools merge finds the calls disjoint", "bedtools")

    # 6. GFF3 passes genometools' validator; coordinates are the BED's, 1-based.
    val = sh(["gt", "gff3validator", "calls.gff3"], work)
    checks.check(val.returncode == 0, "gt gff3validator accepts the GFF3", "genometools 1.6", val.stderr.strip()[:300])
    feats = [l.split("\t") for l in open(os.path.join(work, "calls.gff3")) if not l.startswith("#")]
    checks.equal([(f[0], int(f[3]) - 1, int(f[4])) for f in feats], [(r[0], int(r[1]), int(r[2])) for r in calls],
                 "GFF3 features are the BED calls in 1-based inclusive coordinates", "GFF3 specification 1.26")
    checks.check(all(f[2] == "CpG_island" and "Ontology_term=SO:0000307" in f[8] for f in feats),
                 "CpG islands use Sequence Ontology CpG_island (SO:0000307)", "Sequence Ontology")

    # 7. chrom sizes and browser BED columns.
    sizes = dict((l.split("\t")[0], int(l.split("\t")[1])) for l in open(os.path.join(work, "sizes.txt")))
    checks.equal(sizes, lengths, "--chrom-sizes lists every sequence with its length", "FASTA lengths counted in Python")
    ok = all(int(r[1]) <= int(r[6]) <= int(r[7]) <= int(r[2]) and len(r) == 13 for r in calls)
    checks.check(ok, "browser BED is BED9+4 with thickStart/thickEnd inside the call", "BED format (UCSC)")

    # 8. plot-region.py runs headless and writes a PNG of the expected size (test_plot_region.py checks more).
    py = "/usr/bin/python3"
    reg = sh([py, os.path.join(REPO, "scripts", "plot-region.py"), "--fasta", DEMO, "--region",
              "demo_contig_1:80001-100000", "--posteriors", "p.cpg_island.bedgraph", "--calls", "calls.bed",
              "-o", "region.png"], work)
    checks.equal(png_size(os.path.join(work, "region.png")) if reg.returncode == 0 else reg.stderr, (1000, 550),
                 "plot-region.py writes a 1000x550 PNG (10x5.5 in at 100 dpi)", "PNG IHDR header")
    checks.check(os.path.getsize(os.path.join(work, "region.svg")) > 1000, "plot-region.py writes an SVG", "file size")


tmtest.main("browser tracks against independent readers", body)
