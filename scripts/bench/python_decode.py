"""Times nothing itself: decodes every record of FASTA from Python as scripts/bench.sh asks
(tidemark.decode_file, one thread), keeping each record's posterior array until the next, and
prints the number of calls and bases (checked against the command line's BED by bench.sh).

Usage: python_decode.py PROFILE FASTA [float64|float32|none]
"""
import sys

import tidemark

profile, fasta = sys.argv[1], sys.argv[2]
dtype = sys.argv[3] if len(sys.argv) > 3 else "float64"
dtype = None if dtype == "none" else dtype
calls = bases = 0
for d in tidemark.decode_file(fasta, profile, threads=1, dtype=dtype):
    calls += len(d.bed().splitlines())
    bases += d.length
print(calls, bases)
