"""Times nothing itself: decodes every record of FASTA from Python as scripts/bench.sh asks
(tidemark.decode_file, one thread), keeping each record's posterior array until the next, and
prints the number of calls and bases (checked against the command line's BED by bench.sh). On
stderr: the CPU time of the thread that decoded (Linux /proc), apart from the process's, since
the module commits a large array's pages on a second thread (python/module.cpp, PageCommitter).

Usage: python_decode.py PROFILE FASTA [float64|float32|none]
"""
import os
import sys
import threading

import tidemark


def thread_cpu_seconds():
    """user + system CPU time of the calling thread (/proc/self/task/TID/stat fields 14 and 15)."""
    with open(f"/proc/self/task/{threading.get_native_id()}/stat", encoding="ascii") as f:
        fields = f.read().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


profile, fasta = sys.argv[1], sys.argv[2]
dtype = sys.argv[3] if len(sys.argv) > 3 else "float64"
dtype = None if dtype == "none" else dtype
calls = bases = 0
start = thread_cpu_seconds()
for d in tidemark.decode_file(fasta, profile, threads=1, dtype=dtype):
    calls += len(d.bed().splitlines())
    bases += d.length
print(f"decoding thread CPU s: {thread_cpu_seconds() - start:.2f}", file=sys.stderr)
print(calls, bases)
