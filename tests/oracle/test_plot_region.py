"""scripts/plot-region.py on scan's own outputs: bigWig tracks (cross-checked against the bedGraph
plot; pyBigWig, Debian python3-pybigwig, reads them), bgzip bedGraphs, a sequence name the
tracks do not hold (a clear error, no traceback), and one colour per region type in every panel
(the BED's itemRgb and the profile's colours are the outside reference)."""

import os
import re
import subprocess
import sys
import xml.etree.ElementTree as ET

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

REPO = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
DEMO = os.path.join(REPO, "data", "demo", "demo.fa.gz")
PLOT = os.path.join(REPO, "scripts", "plot-region.py")
SVG = "{http://www.w3.org/2000/svg}"


def plot(work, args, env=None):
    return subprocess.run(["/usr/bin/python3", PLOT] + args, cwd=work, capture_output=True, text=True, env=env)


def artists(svg_path):
    """id -> (colour, path d) of the SVG groups matplotlib writes for artists with a gid."""
    found = {}
    for g in ET.parse(svg_path).getroot().iter(SVG + "g"):
        gid = g.get("id", "")
        if not gid.startswith(("posterior-", "call-")):
            continue
        path = g.find(SVG + "path")
        style = path.get("style", "")
        m = re.search(r"(stroke|fill): (#[0-9a-f]{6})", style)
        key = "stroke" if gid.startswith("posterior-") else "fill"
        m = re.search(key + r": (#[0-9a-f]{6})", style)
        found[gid] = (m.group(1) if m else None, path.get("d", ""))
    return found


def numbers(d):
    return [float(x) for x in re.findall(r"-?\d+(?:\.\d+)?", d)]


def hex_of(rgb):
    return "#" + "".join(f"{int(x):02x}" for x in rgb.split(","))


def body(checks, tm, work):
    region = "demo_contig_1:80001-100000"
    tmtest.run(tm, ["scan", DEMO, "-q", "-o", "calls.bed", "--posteriors", "p"], cwd=work)
    tmtest.run(tm, ["scan", DEMO, "-q", "-o", "/dev/null", "--posteriors", "p", "--track-format", "bigwig"], cwd=work)
    tmtest.run(tm, ["scan", DEMO, "-q", "-o", "calls.bed.gz", "--posteriors", "z", "--bgzip"], cwd=work)

    # 1. The tool's own bigWig draws the same curve as its bedGraph (values float32 vs 3 decimals).
    bg = plot(work, ["--fasta", DEMO, "--region", region, "--posteriors", "p.cpg_island.bedgraph", "--calls",
                     "calls.bed", "-o", "bg.png"])
    bw = plot(work, ["--fasta", DEMO, "--region", region, "--posteriors", "p.cpg_island.bw", "--calls",
                     "calls.bed", "-o", "bw.png"])
    checks.check(bw.returncode == 0 and "Traceback" not in bw.stderr, "plot-region.py draws a bigWig track",
                 "scan --track-format bigwig output", bw.stderr.strip()[-300:])
    if bg.returncode == 0 and bw.returncode == 0:
        a = numbers(artists(os.path.join(work, "bg.svg"))["posterior-cpg_island"][1])
        b = numbers(artists(os.path.join(work, "bw.svg"))["posterior-cpg_island"][1])
        worst = max((abs(x - y) for x, y in zip(a, b)), default=float("inf"))
        checks.check(len(a) == len(b) and len(a) > 10 and worst < 0.05,
                     "the bigWig curve equals the bedGraph curve (same vertices within 0.05 px)",
                     "pyBigWig-read bigWig vs bedGraph", f"{len(a)} vs {len(b)} numbers, max diff {worst:.3g}")

    # 2. A .bedgraph.gz track is labelled with its region type.
    gz = plot(work, ["--fasta", DEMO, "--region", region, "--posteriors", "z.cpg_island.bedgraph.gz", "--calls",
                     "calls.bed", "-o", "gz.png"])
    svg = open(os.path.join(work, "gz.svg")).read() if gz.returncode == 0 else ""
    checks.check("P(cpg_island)" in svg and "P(bedgraph)" not in svg, "a .bedgraph.gz track is labelled P(cpg_island)",
                 "track file name PREFIX.REGION.bedgraph.gz (README)", gz.stderr.strip()[-300:])

    # 3. Sequence names that do not match: an error naming both sides, no traceback, no picture.
    renamed = [("chrA" if i == 0 else n, s) for i, (n, s) in enumerate(tmtest.read_fasta(DEMO))]
    tmtest.write_fasta(os.path.join(work, "renamed.fa"), renamed)
    for track in ("p.cpg_island.bedgraph", "p.cpg_island.bw", "z.cpg_island.bedgraph.gz"):
        bad = plot(work, ["--fasta", "renamed.fa", "--region", "chrA:1-20000", "--posteriors", track, "--calls",
                          "calls.bed", "-o", "bad.png"])
        checks.check(bad.returncode != 0 and "Traceback" not in bad.stderr and "chrA" in bad.stderr
                     and "demo_contig_1" in bad.stderr and not os.path.exists(os.path.join(work, "bad.png")),
                     f"{track}: a name the track does not hold is an error naming it and the track's names",
                     "record names of the FASTA and the track", bad.stderr.strip()[-300:])

    # 4. One colour per region type in every panel: two reported types (gc-shift) on a simulated
    #    genome, tracks given in the other order than the profile's.
    #    The first seed whose genome gets calls of both types (simulate is the same on every machine).
    #    Scanned with the model the genome was drawn from: the template's placeholders, made a
    #    plain profile (scan refuses a template that was never fitted).
    import json
    model = json.loads(tmtest.run(tm, ["profiles", "show", "gc-shift"]))
    del model["template"]
    with open(os.path.join(work, "gc-shift-model.json"), "w") as f:
        json.dump(model, f)
    for seed in range(1, 21):
        tmtest.run(tm, ["simulate", "-p", "gc-shift", "--contigs", "1", "--length", "400000", "--seed", str(seed),
                        "-o", "sim.fa"], cwd=work)
        tmtest.run(tm, ["scan", "sim.fa", "-q", "-p", "gc-shift-model.json", "--bed-style", "browser", "-o", "gc.bed",
                        "--posteriors", "g"], cwd=work)
        rows = [r for r in tmtest.read_bed(os.path.join(work, "gc.bed")) if not r[0].startswith("track")]
        item_rgb = {r[3]: hex_of(r[8]) for r in rows}
        if len(item_rgb) == 2:
            break
    tmtest.run(tm, ["scan", "sim.fa", "-q", "-p", "gc-shift-model.json", "-o", "gc-plain.bed"], cwd=work)
    checks.check(len(item_rgb) == 2, "a simulated genome has calls of both shifted types", "gc.bed",
                 f"seed {seed}: {item_rgb}")
    tracks = ["g.gc_shifted.bedgraph", "g.at_shifted.bedgraph"]
    profile = json.loads(tmtest.run(tm, ["profiles", "show", "gc-shift"]))
    profile_rgb = {r["name"]: hex_of(r["color"]) for r in profile["regions"] if r.get("color")}
    for calls, extra, reference, what in (("gc.bed", [], item_rgb, "the browser BED's itemRgb"),
                                          ("gc-plain.bed", ["--profile", "gc-shift"], profile_rgb,
                                           "the profile's colours (plain BED, --profile)"),
                                          ("gc-plain.bed", [], None, "one colour per type (plain BED, no profile)")):
        env = dict(os.environ, PATH=os.path.dirname(tm) + os.pathsep + os.environ.get("PATH", ""))
        out = plot(work, ["--fasta", "sim.fa", "--region", "sim1:1-400000", "--posteriors"] + tracks +
                   ["--calls", calls, "--window", "1000", "-o", "gc.png"] + extra, env=env)
        if not checks.check(out.returncode == 0, f"plot-region.py draws gc-shift with {what}", "exit status",
                            out.stderr.strip()[-300:]):
            continue
        drawn = artists(os.path.join(work, "gc.svg"))
        by_type = {}
        for gid, (colour, _) in drawn.items():
            kind = gid.split("-")[1]
            by_type.setdefault(kind, set()).add(colour)
        same = all(len(c) == 1 for c in by_type.values()) and len(set.union(*by_type.values())) == len(by_type)
        checks.check(same and set(by_type) == {"gc_shifted", "at_shifted"},
                     f"{what}: each region type has one colour in both panels, the types differ",
                     "SVG artists by region", str(by_type))
        if reference:
            checks.equal({k: next(iter(v)) for k, v in by_type.items()}, {k: reference.get(k) for k in by_type},
                         f"{what}: the colours are the reference's", "gc-shift profile / BED itemRgb")


tmtest.main("plot-region.py on scan's own outputs", body)
