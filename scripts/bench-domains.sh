#!/usr/bin/env bash
# Benchmark: window profiles against the per-base default on the same input, in the same run:
# `scan -p isochore` against `scan -p cpg-island`, and one EM iteration of `fit -p isochore`
# against one of `fit -p cpg-island` (wall seconds from the progress line; medians of 3).
# Default input: human GRCh37 chrX bases 1-69,999,930 from Debian's smalt-examples.
# Usage: scripts/bench-domains.sh [TIDEMARK_BINARY] [FASTA]
set -euo pipefail

bin=${1:-build/tidemark}
input=${2:-/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz}
[ -x "$bin" ] || { echo "bench-domains: no tidemark binary at $bin (build first)" >&2; exit 1; }
[ -r "$input" ] || { echo "bench-domains: cannot read $input (apt-get install smalt-examples)" >&2; exit 1; }
[ -x /usr/bin/time ] || { echo "bench-domains: needs /usr/bin/time (apt-get install time)" >&2; exit 1; }

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
plain="$work/input.fa"
zcat -f "$input" > "$plain"   # both profiles read the same plain text

median() { sort -g | awk '{v[NR] = $1} END {print v[int((NR + 1) / 2)]}'; }

scan_seconds() {  # profile -> median wall seconds of 3 scans, 1 thread
  for _ in 1 2 3; do
    /usr/bin/time -f '%e' -o "$work/t" "$bin" scan "$plain" -p "$1" -t 1 -q -o "$work/out.bed"
    cat "$work/t"
  done | median
}
iteration_seconds() {  # profile -> median seconds of the first EM iteration, 1 thread
  for _ in 1 2 3; do
    "$bin" fit "$plain" -p "$1" -t 1 --max-iter 1 --tol 0 -o "$work/fit.json" 2>&1 |
      sed -n 's/.*iteration 0: .*, \([0-9.]*\) s$/\1/p'
  done | median
}

cpg_scan=$(scan_seconds cpg-island)
iso_scan=$(scan_seconds isochore)
cpg_iter=$(iteration_seconds cpg-island)
iso_iter=$(iteration_seconds isochore)
bases=$(grep -v '^>' "$plain" | tr -d '\n' | wc -c)

awk -v input="$input" -v bases="$bases" -v cs="$cpg_scan" -v is="$iso_scan" -v ci="$cpg_iter" -v ii="$iso_iter" 'BEGIN {
  printf "input                   %s (%d bases)\n", input, bases
  printf "scan -p cpg-island      %8.2f s  %7.1f Mbp/s\n", cs, bases / cs / 1e6
  printf "scan -p isochore        %8.2f s  %7.1f Mbp/s\n", is, bases / is / 1e6
  printf "scan isochore/cpg       %8.2f    (target <= 1)\n", is / cs
  printf "fit iteration cpg       %8.2f s\n", ci
  printf "fit iteration isochore  %8.2f s\n", ii
  printf "iteration isochore/cpg  %8.2f    (target <= 1)\n", ii / ci
}'
