"""A real genome-browser client reads tidemark's tracks: the demo's calls as bgzip BED with its
tabix index, as GFF3, and the posterior as bigWig are served on 127.0.0.1 to igv.js (the
embeddable genome browser of igv.org, npm package igv) in Debian's chromium, driven by
playwright-core (npm). What igv.js reads at a locus must equal what the files hold, read
independently: the BED with tabix (htslib), the bigWig with pyBigWig (libBigWig), the GFF3 as
text. The npm packages are installed with `npm ci` from tests/browser/package-lock.json into the
build folder when they are missing (Debian's nodejs and npm: scripts/install-deps.sh)."""

import json
import os
import shutil
import subprocess
import sys

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

REPO = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
DEMO = os.path.join(REPO, "data", "demo", "demo.fa.gz")
CLIENT = os.path.join(REPO, "tests", "browser")


def node_modules(binary):
    """tests/browser's npm packages, installed once per build folder with npm ci (the lock file
    pins every version and checksum)."""
    target = os.path.join(os.path.dirname(binary), "browser-client")
    modules = os.path.join(target, "node_modules")
    lock = os.path.join(CLIENT, "package-lock.json")
    stamp = os.path.join(target, "package-lock.json")
    if not (os.path.isdir(modules) and os.path.exists(stamp) and
            tmtest.read_bytes(stamp) == tmtest.read_bytes(lock)):
        os.makedirs(target, exist_ok=True)
        for f in ("package.json", "package-lock.json"):
            shutil.copyfile(os.path.join(CLIENT, f), os.path.join(target, f))
        npm = subprocess.run(["npm", "ci", "--no-audit", "--no-fund", "--ignore-scripts"], cwd=target,
                             capture_output=True, text=True, timeout=600)
        if npm.returncode != 0:
            raise RuntimeError("npm ci failed:\n" + npm.stderr[-2000:])
    return modules


def write_reference(records, path):
    """Plain FASTA with 60-base lines and its faidx index (samtools faidx format: name, length,
    offset of the first base, bases per line, bytes per line), for the browser's reference."""
    offset = 0
    with open(path, "w") as fa, open(path + ".fai", "w") as fai:
        for name, seq in records:
            header = f">{name}\n"
            fa.write(header)
            offset += len(header)
            fai.write(f"{name}\t{len(seq)}\t{offset}\t60\t61\n")
            for i in range(0, len(seq), 60):
                line = seq[i:i + 60] + "\n"
                fa.write(line)
                offset += len(line)


def body(checks, tm, work):
    for tool in ("node", "npm", "tabix"):
        if not shutil.which(tool):
            raise RuntimeError(f"{tool} is not installed (scripts/install-deps.sh installs it)")
    records = tmtest.read_fasta(DEMO)
    write_reference(records, os.path.join(work, "ref.fa"))
    tmtest.run(tm, ["scan", DEMO, "-q", "-o", "calls.bed.gz", "--bgzip", "--gff3", "calls.gff3", "--posteriors",
                    "post", "--track-format", "bigwig"], cwd=work)
    os.rename(os.path.join(work, "post.cpg_island.bw"), os.path.join(work, "post.bw"))
    modules = node_modules(tm)

    # The locus: the first 60 kb of the first contig, which holds calls (checked below).
    chrom, start, end = records[0][0], 0, 60000
    env = dict(os.environ, TIDEMARK_NODE_MODULES=modules, NODE_PATH=modules)
    # read_tracks.mjs imports playwright-core by name: run it from a copy beside node_modules.
    script = os.path.join(os.path.dirname(modules), "read_tracks.mjs")
    shutil.copyfile(os.path.join(CLIENT, "read_tracks.mjs"), script)
    proc = subprocess.run(["node", script, work, chrom, str(start), str(end)], capture_output=True, text=True,
                          env=env, timeout=300)
    if not checks.check(proc.returncode == 0, "igv.js loads the BED, GFF3 and bigWig in chromium",
                        "node read_tracks.mjs", proc.stderr[-1500:]):
        return
    got = json.loads(proc.stdout)
    checks.equal(got["page_errors"], [], "no error on the page", "chromium page errors")
    checks.equal(got["blocked"], [], "nothing is requested beyond 127.0.0.1", "playwright request log")
    checks.check({"calls.bed.gz", "calls.bed.gz.tbi", "calls.gff3", "post.bw"} <= set(got["served"]),
                 "igv.js fetched the BED, its tabix index, the GFF3 and the bigWig", "the test server's log",
                 str(got["served"]))

    # BED: what tabix (htslib) returns for the locus, field by field.
    tabix = subprocess.run(["tabix", os.path.join(work, "calls.bed.gz"), f"{chrom}:{start + 1}-{end}"],
                           capture_output=True, text=True, check=True).stdout
    expected = [line.split("\t") for line in tabix.splitlines()]
    checks.check(len(expected) >= 2, f"the locus holds calls ({len(expected)})", "tabix")
    checks.equal([(f["chr"], f["start"], f["end"], f["name"], f["score"], f["strand"]) for f in got["bed"]],
                 [(r[0], int(r[1]), int(r[2]), r[3], int(r[4]), r[5]) for r in expected],
                 "igv.js reads the BED's features at the locus: chrom, start, end, name, score, strand",
                 "tabix 1.16 (htslib) on calls.bed.gz")

    # GFF3: the features of the file's text that overlap the locus (1-based inclusive in GFF3,
    # 0-based half-open in igv.js).
    rows = []
    with open(os.path.join(work, "calls.gff3")) as f:
        for line in f:
            if line.startswith("#") or not line.strip():
                continue
            c = line.rstrip("\n").split("\t")
            b, e = int(c[3]) - 1, int(c[4])
            if c[0] == chrom and b < end and e > start:
                attrs = dict(kv.split("=", 1) for kv in c[8].split(";"))
                rows.append((c[0], b, e, c[2], float(c[5]), attrs["ID"]))
    checks.equal([(f["chr"], f["start"], f["end"], f["type"], f["score"], f["id"]) for f in got["gff3"]], rows,
                 "igv.js reads the GFF3's features at the locus: seqid, start, end, type, score, ID",
                 "the GFF3 text (GFF3 specification 1.26: 1-based, inclusive)")

    # bigWig: the intervals pyBigWig (libBigWig) reads at base level. igv.js joins nothing and
    # splits nothing at bpPerPixel 1; values are float32 in the file.
    import pyBigWig
    bw = pyBigWig.open(os.path.join(work, "post.bw"))
    want = [(a, b, v) for a, b, v in bw.intervals(chrom, start, end)]
    bw.close()
    have = [(v["start"], v["end"], v["value"]) for v in got["bigwig"]]
    checks.check(len(want) > 100, f"the locus holds {len(want)} bigWig intervals", "pyBigWig 0.3")
    diff = next((i for i, (x, y) in enumerate(zip(have, want)) if x[:2] != y[:2]), None)
    checks.check(len(have) == len(want) and diff is None,
                 f"igv.js reads the bigWig's {len(want)} intervals at the locus", "pyBigWig intervals()",
                 f"{len(have)} read; first difference at {diff}: "
                 f"{have[diff] if diff is not None else ''} vs {want[diff] if diff is not None else ''}")
    checks.check(len(have) == len(want) and all(abs(x[2] - y[2]) <= 1e-7 for x, y in zip(have, want)),
                 "igv.js reads the bigWig's values at the locus (float32)", "pyBigWig intervals()",
                 str([(x, y) for x, y in zip(have, want) if abs(x[2] - y[2]) > 1e-7][:3]))
    inside = [v for a, b, v in want if a < int(expected[0][2]) and b > int(expected[0][1])]
    checks.check(max(inside) >= 0.5, "the posterior reaches the calling threshold inside the first call",
                 "pyBigWig and tabix", f"max {max(inside):.3f}")


tmtest.main("tidemark's tracks read by a genome-browser client (igv.js in chromium)", body)
