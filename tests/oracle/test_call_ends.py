"""Oracle: call ends at base resolution (calling.refine_ends). Real GC-shifted segments of other
genomes inserted into a real host genome: the documented recipe (fit the gc-shift template to
the chimera, scan) must place the call ends within 1 kb of the inserts' ends (median), and
refining the ends must not lower the inserts' coverage. The truth is where the segments were
inserted, fixed before anything runs."""

import gzip
import json
import os
import sys

import numpy as np

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

# Open datasets shipped by Debian packages (scripts/install-deps.sh installs them).
HOST = "/usr/share/doc/ragout/examples/E.Coli/references/MG1655-K12.fasta.gz"  # ragout-examples
BJAP = ("/usr/share/doc/cct/examples/sample_projects/sample_project_3/reference_genome/"
        "NC_004463.gbk.gz")  # cct-examples (GenBank; the ORIGIN section is the sequence)
SAUREUS = "/usr/share/doc/sibelia/examples/Sibelia/Staphylococcus_aureus/Staphylococcus.fasta.gz"

TRUTH = "the inserted segments' coordinates in the chimera (set by this test before any run)"
ISSUE = "acceptance bound of issue 21 (boundaries finer than the window grid: median error <= 1 kb)"
NUMPY = "numpy over the BED and bedGraph files"

# Ten segments of 20-50 kb: five of B. japonicum USDA110 (GC about 64 %) and five of S. aureus
# (GC about 33 %) into E. coli K-12 MG1655 (GC about 51 %), at fixed positions of the host
# spread over its length, none on the 5-kb window grid.
SEGMENTS = 10
SEED = 21


def genbank_sequence(path):
    seq, inside = [], False
    with gzip.open(path, "rt") as f:
        for line in f:
            if line.startswith("ORIGIN"):
                inside = True
            elif line.startswith("//"):
                inside = False
            elif inside:
                seq.append("".join(line.split()[1:]))
    return "".join(seq).upper()


def first_record(path):
    """The first record of a gzip FASTA file, upper-cased (the file holds four genomes)."""
    parts = []
    with gzip.open(path, "rt") as f:
        assert f.readline().startswith(">")
        for line in f:
            if line.startswith(">"):
                break
            parts.append(line.strip())
    return "".join(parts).upper()


def build_chimera(path):
    """Writes the chimera; returns its length and the inserts as (begin, end, donor)."""
    host = tmtest.read_fasta(HOST)[0][1]
    donors = [("B. japonicum", genbank_sequence(BJAP)), ("S. aureus", first_record(SAUREUS))]
    rng = np.random.default_rng(SEED)
    lengths = rng.integers(20000, 50001, SEGMENTS)
    # Host positions: one per eleventh of the host, moved by up to 40 kb.
    at = [int((k + 1) * len(host) / (SEGMENTS + 1) + rng.integers(-40000, 40001)) for k in range(SEGMENTS)]
    parts, inserts, last, shift = [], [], 0, 0
    for k in range(SEGMENTS):
        name, donor = donors[k % 2]
        start = int(rng.integers(100000, len(donor) - 100000))
        segment = donor[start:start + int(lengths[k])]
        assert set(segment) <= set("ACGT"), f"{name} segment at {start} has unknown bases"
        parts += [host[last:at[k]], segment]
        inserts.append((at[k] + shift, at[k] + shift + len(segment), name))
        shift += len(segment)
        last = at[k]
    parts.append(host[last:])
    chimera = "".join(parts)
    tmtest.write_fasta(path, [("chimera", chimera)])
    return len(chimera), inserts


def covered(calls, begin, end):
    return sum(max(0, min(c[2], end) - max(c[1], begin)) for c in calls)


def scan(binary, work, profile, out, extra=()):
    tmtest.run_in(binary, work, ["scan", "chimera.fa", "-p", profile, "-o", out, "-q", *extra])
    return [(r[0], int(r[1]), int(r[2]), r[3], float(r[6]), float(r[7]))
            for r in tmtest.read_bed(os.path.join(work, out))]


def body(checks, binary, work):
    length, inserts = build_chimera(os.path.join(work, "chimera.fa"))
    tmtest.run_in(binary, work, ["fit", "chimera.fa", "-p", "gc-shift", "-o", "P.json", "-t", "2", "-q"])
    fitted = tmtest.read_json(os.path.join(work, "P.json"))
    checks.equal(fitted["calling"].get("refine_ends"), True, "the fitted gc-shift profile refines call ends",
                 "README (built-in profiles: gc-shift)")
    on_grid = json.loads(json.dumps(fitted))
    del on_grid["calling"]["refine_ends"]
    with open(os.path.join(work, "grid.json"), "w") as f:
        json.dump(on_grid, f)

    grid = scan(binary, work, "grid.json", "grid.bed")
    refined = scan(binary, work, "P.json", "refined.bed", ["--posteriors", "post", "--posterior-digits", "8"])
    checks.check(all(c[1] % 5000 == 0 or c[1] == 0 for c in grid), "without refinement, call starts lie on the "
                 "5-kb window grid", "README (window profiles)")

    tmtest.check_refined_ends(checks, [c[1:3] for c in grid], [c[1:3] for c in refined],
                              [(b, e) for b, e, _ in inserts], 1000, ISSUE)

    share_before = np.array([covered(grid, b, e) / (e - b) for b, e, _ in inserts])
    share_after = np.array([covered(refined, b, e) / (e - b) for b, e, _ in inserts])
    print("# insert coverage grid/refined: " + " ".join(f"{x:.2f}/{y:.2f}" for x, y in zip(share_before,
                                                                                          share_after)), flush=True)
    checks.check((share_after >= 0.5).sum() >= (share_before >= 0.5).sum(),
                 "refinement keeps every insert that was at least half covered", TRUTH,
                 f"{(share_after >= 0.5).sum()} vs {(share_before >= 0.5).sum()} of {len(inserts)}")
    checks.check(share_after.sum() >= share_before.sum(), "refinement does not lower the inserts' total coverage",
                 TRUTH, f"{share_after.sum():.3f} vs {share_before.sum():.3f} insert-lengths")

    # mean_posterior and confident_fraction of refined calls: each base counts with its window's
    # posterior, which the bedGraph track holds base by base.
    track = tmtest.read_bedgraph(os.path.join(work, "post.gc_shifted.bedgraph"), {"chimera": length})["chimera"]
    track_at = tmtest.read_bedgraph(os.path.join(work, "post.at_shifted.bedgraph"), {"chimera": length})["chimera"]
    worst_mean = worst_confident = 0.0
    for _, b, e, region, mean, confident in refined:
        p = (track if region == "gc_shifted" else track_at)[b:e]
        worst_mean = max(worst_mean, abs(p.mean() - mean))
        worst_confident = max(worst_confident, abs((p >= 0.95).mean() - confident))
    checks.at_most(worst_mean, 1e-4, "refined calls: mean_posterior = mean of the posterior track over the call",
                   NUMPY + " (README: calls, column mean_posterior)")
    checks.at_most(worst_confident, 1e-4, "refined calls: confident_fraction = share of the call's bases whose "
                   "track value is >= 0.95", NUMPY + " (README: calls, column confident_fraction)")

    scan(binary, work, "P.json", "refined.t1.bed", ["-t", "1"])
    tmtest.check_same_calls(checks, os.path.join(work, "refined.t1.bed"), os.path.join(work, "refined.bed"),
                            "refined calls are the same with -t 1 and the default threads")


if __name__ == "__main__":
    tmtest.main("call ends at base resolution on GC-shifted inserts", body)
