#!/usr/bin/env python3
"""Draws a run overview from a scan report (--report JSON): per-contig bars of the expected
fraction of bases in each region type, and genome-wide histograms of call length and call
confidence.

Usage: plot-overview.py REPORT.json -o OUT.png   (an .svg is written beside it). Headless."""
import argparse
import json
import os
import sys

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

PALETTE = ["#006e78", "#c86e00", "#6e32a0", "#288c46", "#be1e50", "#5a5a5a"]


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("report")
    ap.add_argument("-o", "--output", required=True)
    ap.add_argument("--max-contigs", type=int, default=40, help="bars for at most this many contigs [40]")
    args = ap.parse_args()
    with open(args.report) as fh:
        doc = json.load(fh)
    if doc.get("format") != "tidemark-report/1":
        sys.exit(f"plot-overview: {args.report} is not a tidemark report (scan --report)")

    contigs = doc["contigs"][: args.max_contigs]
    regions = list(doc["genome"]["regions"].keys())
    reported = [r for r in regions if doc["genome"]["regions"][r]["reported"]]

    fig, (ax_bar, ax_len, ax_conf) = plt.subplots(1, 3, figsize=(13, 4), gridspec_kw={"width_ratios": [2, 1.2, 1]})
    names = [c["name"] for c in contigs]
    bottom = [0.0] * len(contigs)
    for i, r in enumerate(regions):
        frac = [c["regions"][r]["expected_fraction"] for c in contigs]
        ax_bar.bar(range(len(contigs)), frac, bottom=bottom, color=PALETTE[i % len(PALETTE)], label=r)
        bottom = [b + f for b, f in zip(bottom, frac)]
    ax_bar.set_xticks(range(len(contigs)))
    ax_bar.set_xticklabels(names, rotation=45, ha="right", fontsize=7)
    ax_bar.set_ylabel("expected fraction of bases")
    ax_bar.set_title("region types per contig", fontsize=10)
    ax_bar.legend(fontsize=8, loc="center right", framealpha=0.9)

    for i, r in enumerate(reported):
        g = doc["genome"]["regions"][r]
        lh, ch = g["call_length_histogram"], g["confidence_histogram"]
        colour = PALETTE[regions.index(r) % len(PALETTE)]
        widths = [b - a for a, b in zip(lh["edges"], lh["edges"][1:])]
        ax_len.bar(lh["edges"][:-1], lh["counts"], width=widths, align="edge", alpha=0.7, color=colour, label=r)
        cw = [b - a for a, b in zip(ch["edges"], ch["edges"][1:])]
        ax_conf.bar(ch["edges"][:-1], ch["counts"], width=cw, align="edge", alpha=0.7, color=colour, label=r)
    ax_len.set_xscale("log")
    ax_len.set_xlabel("call length (bp)")
    ax_len.set_ylabel("calls")
    ax_len.set_title("call lengths", fontsize=10)
    ax_conf.set_xlabel("call confidence (mean posterior)")
    ax_conf.set_ylabel("calls")
    ax_conf.set_xlim(0, 1)
    ax_conf.set_title("call confidence", fontsize=10)
    for ax in (ax_len, ax_conf):
        ax.legend(fontsize=8, frameon=False)
    fig.suptitle(f"tidemark {doc['tool_version']}, profile {doc['profile']}: {doc['genome']['contigs']} contigs, "
                 f"{doc['genome']['length']:,} bp", fontsize=10)
    fig.tight_layout()
    fig.savefig(args.output, dpi=100)
    fig.savefig(os.path.splitext(args.output)[0] + ".svg")
    print(f"plot-overview: wrote {args.output} and its .svg", file=sys.stderr)


if __name__ == "__main__":
    main()
