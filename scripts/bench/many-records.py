#!/usr/bin/env python3
"""Cuts one simulated sequence (FASTA, a single line) into COUNT records of MIN..MAX bases,
lengths uniform and seeded, for the many-records case of scripts/bench.sh.
Usage: many-records.py COUNT MIN MAX SEED --lengths      prints the total length needed
       many-records.py COUNT MIN MAX SEED SOURCE.fa OUT.fa"""
import random
import sys


def lengths(count, low, high, seed):
    rng = random.Random(seed)
    return [rng.randint(low, high) for _ in range(count)]


def main():
    count, low, high, seed = (int(x) for x in sys.argv[1:5])
    sizes = lengths(count, low, high, seed)
    if sys.argv[5] == "--lengths":
        print(sum(sizes))
        return
    with open(sys.argv[5]) as f:
        f.readline()
        sequence = f.readline().rstrip("\n")
    assert len(sequence) >= sum(sizes), "the source sequence is too short"
    with open(sys.argv[6], "w") as out:
        at = 0
        for i, n in enumerate(sizes, 1):
            out.write(f">r{i}\n{sequence[at:at + n]}\n")
            at += n


main()
