#!/usr/bin/env python3
"""Draws one region of a scanned FASTA: GC fraction and CpG observed/expected in sliding
windows, the posterior curve of every region type, and the calls as boxes.

Usage: plot-region.py --fasta FA --region CHR:BEG-END --posteriors TRACK [TRACK ...]
                      --calls CALLS.bed [--profile P] [--window 200] -o OUT.png
An .svg is written beside the PNG. Tracks are scan's posterior tracks: bedGraph (plain or
bgzip) or bigWig (read with pyBigWig). A region type has one colour in every panel: the
itemRgb of browser-style calls, else the profile's colour (--profile: a built-in name or a
profile file), else tidemark's palette in the order the types first appear.
Runs headless (matplotlib's Agg backend). Inputs may be gzip/bgzip-compressed."""
import argparse
import gzip
import json
import os
import subprocess
import sys

import matplotlib

matplotlib.use("Agg")
matplotlib.rcParams["svg.fonttype"] = "none"  # text stays text in the SVG (searchable, editable)
import matplotlib.pyplot as plt  # noqa: E402
from matplotlib.patches import Rectangle  # noqa: E402

# tidemark's palette (src/track.cpp region_color), used when neither calls nor profile give a colour.
PALETTE = ["#006e78", "#c86e00", "#6e32a0", "#288c46", "#be1e50", "#5a5a5a", "#1450be", "#967800"]
TRACK_SUFFIXES = (".bedgraph.gz", ".bedgraph", ".bedGraph", ".bw", ".bigwig", ".bigWig")
BIGWIG_MAGIC = (0x888FFC26).to_bytes(4, "little")


def fail(message):
    sys.exit(f"plot-region: error: {message}")


def magic_of(path):
    try:
        with open(path, "rb") as probe:
            return probe.read(4)
    except OSError as e:
        fail(f"cannot read {path}: {e.strerror}")


def open_text(path):
    magic = magic_of(path)
    if magic == BIGWIG_MAGIC:
        fail(f"{path} is a bigWig file, not text")
    return gzip.open(path, "rt") if magic[:2] == b"\x1f\x8b" else open(path)


def region_of_track(path):
    """The region type of a track PREFIX.REGION.bedgraph[.gz] or PREFIX.REGION.bw."""
    base = os.path.basename(path)
    for suffix in TRACK_SUFFIXES:
        if base.endswith(suffix):
            base = base[: -len(suffix)]
            break
    return base.rsplit(".", 1)[-1] if "." in base else base


def parse_region(text):
    name, _, span = text.rpartition(":")
    if not name or "-" not in span:
        fail(f"--region must be CHR:BEG-END (1-based inclusive), not {text!r}")
    try:
        beg, end = (int(x.replace(",", "")) for x in span.split("-"))
    except ValueError:
        fail(f"--region must be CHR:BEG-END with whole numbers, not {text!r}")
    if beg < 1 or end < beg:
        fail(f"bad coordinates in {text!r}: 1 <= BEG <= END")
    return name, beg - 1, end


def read_sequence(path, name, begin, end):
    """Bases [begin, end) of record `name`, upper case."""
    parts, inside, pos = [], False, 0
    with open_text(path) as fh:
        for line in fh:
            if line.startswith(">"):
                if inside:
                    break
                inside = line[1:].split()[0] == name if line[1:].split() else False
                pos = 0
                continue
            if not inside:
                continue
            line = line.strip().replace(" ", "").replace("\t", "")
            lo, hi = max(begin, pos), min(end, pos + len(line))
            if lo < hi:
                parts.append(line[lo - pos:hi - pos])
            pos += len(line)
            if pos >= end:
                break
    if not parts:
        fail(f"no bases of {name}:{begin + 1}-{end} in {path} (is {name!r} a record of it?)")
    return "".join(parts).upper()


def windows(seq, begin, width):
    step = max(1, width // 4)
    xs, gc, oe = [], [], []
    for start in range(0, max(1, len(seq) - width + 1), step):
        w = seq[start:start + width]
        c, g = w.count("C"), w.count("G")
        known = sum(w.count(b) for b in "ACGT")
        cpg = sum(1 for i in range(len(w) - 1) if w[i] == "C" and w[i + 1] == "G")
        xs.append(begin + start + len(w) / 2)
        gc.append((c + g) / known if known else float("nan"))
        # observed/expected CpG, Gardiner-Garden & Frommer (1987)
        oe.append(cpg * known / (c * g) if c and g else float("nan"))
    return xs, gc, oe


def read_track(path, name, begin, end):
    """Steps (xs, ys) of a posterior track over [begin, end) and the sequence names it holds."""
    xs, ys = [], []
    if magic_of(path) == BIGWIG_MAGIC:
        try:
            import pyBigWig
        except ImportError:
            fail(f"{path} is a bigWig file; reading it needs pyBigWig (Debian python3-pybigwig)")
        bw = pyBigWig.open(path)
        if bw is None:
            fail(f"cannot open bigWig file {path}")
        names = list(bw.chroms())
        if name in names:
            for s, e, v in bw.intervals(name, begin, min(end, bw.chroms(name))) or []:
                xs += [max(s, begin), min(e, end)]
                ys += [v, v]
        bw.close()
        return xs, ys, names
    names = []
    with open_text(path) as fh:
        for lineno, line in enumerate(fh, 1):
            if line.startswith(("#", "track", "browser")) or not line.strip():
                continue
            f = line.rstrip("\n").split("\t")
            if len(f) < 4:
                fail(f"{path}:{lineno}: a bedGraph line has 4 columns")
            if not names or names[-1] != f[0]:
                if f[0] not in names:
                    names.append(f[0])
            if f[0] != name:
                continue
            s, e, v = int(f[1]), int(f[2]), float(f[3])
            if e <= begin or s >= end:
                continue
            xs += [max(s, begin), min(e, end)]
            ys += [v, v]
    return xs, ys, names


def read_calls(path, name, begin, end):
    calls = []
    with open_text(path) as fh:
        for line in fh:
            if line.startswith(("#", "track", "browser")):
                continue
            f = line.rstrip("\n").split("\t")
            if f[0] == name and int(f[2]) > begin and int(f[1]) < end:
                rgb = None
                if len(f) >= 9 and f[8].count(",") == 2:
                    rgb = "#" + "".join(f"{int(x):02x}" for x in f[8].split(","))
                calls.append((int(f[1]), int(f[2]), f[3], rgb))
    return calls


def profile_colours(profile):
    """Region name -> colour from a profile (file or built-in name, through tidemark)."""
    if os.path.exists(profile):
        with open(profile) as fh:
            doc = json.load(fh)
    else:
        try:
            doc = json.loads(subprocess.run(["tidemark", "profiles", "show", profile], capture_output=True,
                                            text=True, check=True).stdout)
        except (OSError, subprocess.CalledProcessError):
            fail(f"--profile {profile!r}: no such file, and 'tidemark profiles show' does not know it")
    colours = {}
    for i, r in enumerate(doc.get("regions", [])):
        rgb = r.get("color")
        colours[r["name"]] = ("#" + "".join(f"{int(x):02x}" for x in rgb.split(","))) if rgb else PALETTE[i % len(PALETTE)]
    return colours


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fasta", required=True)
    ap.add_argument("--region", required=True)
    ap.add_argument("--posteriors", nargs="+", required=True,
                    help="posterior tracks from scan --posteriors (bedGraph, .bedgraph.gz or bigWig)")
    ap.add_argument("--calls", required=True, help="BED calls from scan")
    ap.add_argument("--profile", help="profile (built-in name or file) whose region colours to use")
    ap.add_argument("--window", type=int, default=200, help="sliding window for GC and CpG o/e [200]")
    ap.add_argument("-o", "--output", required=True, help="PNG path; an SVG is written beside it")
    ap.add_argument("--width", type=float, default=10.0, help="figure width in inches [10]")
    args = ap.parse_args()

    name, begin, end = parse_region(args.region)
    seq = read_sequence(args.fasta, name, begin, end)
    xs, gc, oe = windows(seq, begin, args.window)
    tracks = []
    for path in args.posteriors:
        px, py, names = read_track(path, name, begin, end)
        if not px:
            shown = ", ".join(names[:8]) + (", ..." if len(names) > 8 else "")
            fail(f"{path} has no values for {name}:{begin + 1}-{end}" +
                 (f"; its sequences are {shown}" if names else "; it holds no sequence") +
                 " (posterior tracks cover every decoded base: is it from a scan of this FASTA?)")
        tracks.append((region_of_track(path), px, py))
    calls = read_calls(args.calls, name, begin, end)

    # One colour per region type in every panel.
    colours = profile_colours(args.profile) if args.profile else {}
    for _, _, region, rgb in calls:
        if rgb:
            colours.setdefault(region, rgb)
    for region in [t[0] for t in tracks] + [c[2] for c in calls]:
        if region not in colours:
            colours[region] = PALETTE[len(colours) % len(PALETTE)]

    fig, (ax_comp, ax_post, ax_calls) = plt.subplots(
        3, 1, sharex=True, figsize=(args.width, 5.5), gridspec_kw={"height_ratios": [3, 3, 1]})
    ax_comp.plot(xs, gc, color="#333333", lw=1, label=f"GC fraction ({args.window}-bp windows)")
    ax_comp.plot(xs, oe, color="#888888", lw=1, ls="--", label="CpG observed/expected")
    ax_comp.set_ylabel("composition")
    ax_comp.legend(loc="upper right", fontsize=8, frameon=False)

    for region, px, py in tracks:
        line, = ax_post.plot(px, py, color=colours[region], lw=1.2, label=f"P({region})")
        line.set_gid(f"posterior-{region}")
    ax_post.set_ylim(-0.02, 1.02)
    ax_post.set_ylabel("posterior")
    ax_post.legend(loc="upper right", fontsize=8, frameon=False)

    for i, (s, e, region, _) in enumerate(calls):
        box = Rectangle((s, 0.15), e - s, 0.7, color=colours[region])
        box.set_gid(f"call-{region}-{i}")
        ax_calls.add_patch(box)
    ax_calls.set_yticks([])
    ax_calls.set_ylabel("calls")
    ax_calls.set_ylim(0, 1)
    ax_calls.set_xlim(begin, end)
    ax_calls.set_xlabel(f"{name} position (bp, 0-based)")
    ax_calls.ticklabel_format(axis="x", style="plain", useOffset=False)
    fig.suptitle(f"{name}:{begin + 1:,}-{end:,}", fontsize=10)
    fig.tight_layout()
    fig.savefig(args.output, dpi=100)
    fig.savefig(os.path.splitext(args.output)[0] + ".svg")
    print(f"plot-region: wrote {args.output} and its .svg", file=sys.stderr)


if __name__ == "__main__":
    main()
