#!/usr/bin/env python3
"""Turns the counted training profile (one region per state, as labelled counting needs) into the
built-in cpg-island profile: states bulk1..bulkK in region `background`, state island in region
`cpg_island`; numbers unchanged (rounded to 9 significant digits and renormalised, so that rows
sum to 1 within 1e-12); the initial distribution is the stationary one. Keeps tidemark fit's provenance and adds the whole procedure.

  finish.py COUNTED.json SOURCES.json > data/profiles/cpg-island.json
"""
import json
import sys

import numpy as np



def tidy(row):
    r = [float(f"{x:.9g}") for x in row]
    s = sum(r)
    return [float(f"{x / s:.12g}") for x in r]


def stationary(matrix):
    """pi = pi A with sum 1: the linear system (A^T - I) pi = 0, one row replaced by sum(pi) = 1."""
    a = np.array(matrix).T - np.eye(len(matrix))
    a[-1, :] = 1.0
    rhs = np.zeros(len(matrix))
    rhs[-1] = 1.0
    return np.linalg.solve(a, rhs)


def main():
    counted = json.load(open(sys.argv[1]))
    extra = json.load(open(sys.argv[2]))
    out = {
        "format": "tidemark-profile/1",
        "name": "cpg-island",
        "description": extra["description"],
        "sources": extra["sources"],
        "regions": extra["regions"],
        "states": [],
        "initial": {},
        "transitions": {},
        "calling": extra["calling"],
    }
    for s in counted["states"]:
        region = "cpg_island" if s["region"] == "island" else "background"
        out["states"].append({"name": s["name"], "region": region,
                              "order": s["order"], "emissions": [tidy(r) for r in s["emissions"]]})
    names = [s["name"] for s in counted["states"]]
    matrix = []
    for a in names:
        row = tidy([counted["transitions"][a].get(b, 0.0) for b in names])
        out["transitions"][a] = {b: p for b, p in zip(names, row)}
        matrix.append(row)
    # One training sequence says nothing about where sequences start: the initial distribution is
    # the stationary distribution of the counted transitions (as in cpg-island-2state).
    init = tidy(list(stationary(matrix)))
    out["initial"] = {n: p for n, p in zip(names, init)}
    out["provenance"] = dict(extra["provenance"], fit=counted.get("provenance"))
    json.dump(out, sys.stdout, indent=2)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
