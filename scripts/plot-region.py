#!/usr/bin/env python3
"""Draws one region of a scanned FASTA: GC fraction and CpG observed/expected in sliding
windows, the posterior curve of every region type, and the calls as boxes.

Usage: plot-region.py --fasta FA --region CHR:BEG-END --posteriors A.bedgraph [B.bedgraph ...]
                      --calls CALLS.bed [--window 200] -o OUT.png   (an .svg is written beside it)
Runs headless (matplotlib's Agg backend). Inputs may be gzip/bgzip-compressed."""
import argparse
import gzip
import os
import sys

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
from matplotlib.patches import Rectangle  # noqa: E402

PALETTE = ["#006e78", "#c86e00", "#6e32a0", "#288c46", "#be1e50", "#5a5a5a"]


def open_text(path):
    with open(path, "rb") as probe:
        magic = probe.read(2)
    return gzip.open(path, "rt") if magic == b"\x1f\x8b" else open(path)


def parse_region(text):
    name, _, span = text.rpartition(":")
    if not name or "-" not in span:
        sys.exit(f"plot-region: --region must be CHR:BEG-END (1-based inclusive), not {text!r}")
    beg, end = (int(x.replace(",", "")) for x in span.split("-"))
    if beg < 1 or end < beg:
        sys.exit(f"plot-region: bad coordinates in {text!r}")
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
        sys.exit(f"plot-region: no bases of {name}:{begin + 1}-{end} in {path}")
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


def read_bedgraph(path, name, begin, end):
    xs, ys = [], []
    with open_text(path) as fh:
        for line in fh:
            if line.startswith(("#", "track", "browser")):
                continue
            f = line.split("\t")
            if f[0] != name:
                continue
            s, e, v = int(f[1]), int(f[2]), float(f[3])
            if e <= begin or s >= end:
                continue
            xs += [max(s, begin), min(e, end)]
            ys += [v, v]
    return xs, ys


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
                    rgb = tuple(int(x) / 255 for x in f[8].split(","))
                calls.append((int(f[1]), int(f[2]), f[3], rgb))
    return calls


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fasta", required=True)
    ap.add_argument("--region", required=True)
    ap.add_argument("--posteriors", nargs="+", required=True, help="bedGraph files from scan --posteriors")
    ap.add_argument("--calls", required=True, help="BED calls from scan")
    ap.add_argument("--window", type=int, default=200, help="sliding window for GC and CpG o/e [200]")
    ap.add_argument("-o", "--output", required=True, help="PNG path; an SVG is written beside it")
    ap.add_argument("--width", type=float, default=10.0, help="figure width in inches [10]")
    args = ap.parse_args()

    name, begin, end = parse_region(args.region)
    seq = read_sequence(args.fasta, name, begin, end)
    xs, gc, oe = windows(seq, begin, args.window)

    fig, (ax_comp, ax_post, ax_calls) = plt.subplots(
        3, 1, sharex=True, figsize=(args.width, 5.5), gridspec_kw={"height_ratios": [3, 3, 1]})
    ax_comp.plot(xs, gc, color="#333333", lw=1, label=f"GC fraction ({args.window}-bp windows)")
    ax_comp.plot(xs, oe, color="#c86e00", lw=1, label="CpG observed/expected")
    ax_comp.set_ylabel("composition")
    ax_comp.legend(loc="upper right", fontsize=8, frameon=False)

    for i, path in enumerate(args.posteriors):
        px, py = read_bedgraph(path, name, begin, end)
        label = os.path.basename(path).split(".")[-2] if path.count(".") >= 2 else path
        ax_post.plot(px, py, color=PALETTE[i % len(PALETTE)], lw=1.2, label=f"P({label})")
    ax_post.set_ylim(-0.02, 1.02)
    ax_post.set_ylabel("posterior")
    ax_post.legend(loc="upper right", fontsize=8, frameon=False)

    names = []
    for s, e, region, rgb in read_calls(args.calls, name, begin, end):
        if region not in names:
            names.append(region)
        colour = rgb or PALETTE[names.index(region) % len(PALETTE)]
        ax_calls.add_patch(Rectangle((s, 0.15), e - s, 0.7, color=colour))
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
