#!/usr/bin/python3
"""Compares tidemark's calls with the benchmark baseline's (chrom, start, end).

The baseline calls every run of P(cpg_island) >= 0.5 of at least the minimum length; tidemark
also drops a cpg_island call whose bases hold no CpG (README, "Calls"), a rule the textbook
baseline does not have. So the baseline's calls without a CpG in the input are left out before
comparing. Prints "yes" when the rest are identical, else "NO" and the first difference on
stderr.
"""
import sys

from check_agreement import read_fasta, read_intervals


def main():
    tidemark_bed, baseline_bed, fasta = sys.argv[1:4]
    seqs = read_fasta(fasta)
    baseline = [c for c in read_intervals(baseline_bed) if "CG" in seqs[c[0]][c[1]:c[2]]]
    ours = read_intervals(tidemark_bed)
    if ours == baseline:
        print("yes")
        return
    for k, (a, b) in enumerate(zip(ours, baseline)):
        if a != b:
            print(f"same_calls: call {k + 1}: tidemark {a}, baseline {b}", file=sys.stderr)
            break
    else:
        print(f"same_calls: {len(ours)} calls against {len(baseline)}", file=sys.stderr)
    print("NO")


if __name__ == "__main__":
    main()
