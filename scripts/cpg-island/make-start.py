#!/usr/bin/env python3
"""The starting structure for counting: K background states bulk1..bulkK in regions bg1..bgK and
one island state in region island (labelled counting needs one state per region), order 1,
every entry non-zero so that the counts decide (placeholder numbers).

  make-start.py K > start.json
"""
import json
import sys

k = int(sys.argv[1])
names = [f"bulk{i + 1}" for i in range(k)] + ["island"]
regions = [f"bg{i + 1}" for i in range(k)] + ["island"]
uniform = [[0.25] * 4 for _ in range(4)]
profile = {
    "format": "tidemark-profile/1",
    "name": "cpg-island-start",
    "description": "starting structure for counting the default cpg-island profile",
    "sources": ["structure only; every number is replaced by counts"],
    "regions": [{"name": r, "report": r == "island"} for r in regions],
    "states": [{"name": n, "region": r, "order": 1, "emissions": uniform} for n, r in zip(names, regions)],
    "initial": {n: 1 / len(names) for n in names},
    "transitions": {a: {b: (0.5 if a == b else 0.5 / (len(names) - 1)) for b in names} for a in names},
}
json.dump(profile, sys.stdout, indent=1)
sys.stdout.write("\n")
