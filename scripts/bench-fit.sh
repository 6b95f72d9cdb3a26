#!/usr/bin/env bash
# Benchmark: one EM iteration of `tidemark fit` against one `tidemark scan` of the same input and
# profile (a 3-class order-1 template seeded from the data), with wall seconds and peak RSS.
# Default input: human GRCh37 chrX bases 1-69,999,930 from Debian's smalt-examples.
# Usage: scripts/bench-fit.sh [TIDEMARK_BINARY] [FASTA]
set -euo pipefail

bin=${1:-build/tidemark}
input=${2:-/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz}
[ -x "$bin" ] || { echo "bench-fit: no tidemark binary at $bin (build first)" >&2; exit 1; }
[ -r "$input" ] || { echo "bench-fit: cannot read $input (apt-get install smalt-examples)" >&2; exit 1; }
[ -x /usr/bin/time ] || { echo "bench-fit: needs /usr/bin/time (apt-get install time)" >&2; exit 1; }

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

# The template is seeded from the data and evaluated once (--max-iter 0), not fitted.
"$bin" fit "$input" --classes 3 --order 1 --max-iter 0 -q -o "$work/template.json"

/usr/bin/time -f '%e %M' -o "$work/scan.time" \
  "$bin" scan "$input" -p "$work/template.json" -q -o "$work/scan.bed"
# --max-iter 1: the E-step of iteration 0 feeds the one update, then the result is evaluated
# (a second E-step), so the process runs two E-steps; the iteration time is the first one's.
/usr/bin/time -f '%e %M' -o "$work/fit.time" \
  "$bin" fit "$input" -p "$work/template.json" --max-iter 1 --tol 0 -o "$work/fit.json" 2> "$work/fit.log"

read -r scan_s scan_kb < "$work/scan.time"
read -r fit_s fit_kb < "$work/fit.time"
iter_s=$(sed -n 's/.*iteration 0: .*, \([0-9.]*\) s$/\1/p' "$work/fit.log")
[ -n "$iter_s" ] || { echo "bench-fit: no iteration line in the fit log:" >&2; cat "$work/fit.log" >&2; exit 1; }
bases=$(grep -o '"bases": [0-9]*' "$work/fit.json" | head -1 | grep -o '[0-9]*$')

awk -v input="$input" -v bases="$bases" -v ss="$scan_s" -v sk="$scan_kb" -v it="$iter_s" \
    -v fs="$fit_s" -v fk="$fit_kb" 'BEGIN {
  printf "input            %s (%s bases)\n", input, bases
  printf "scan             %8.2f s  %8.1f MiB peak RSS\n", ss, sk / 1024
  printf "fit iteration    %8.2f s  (E-step + M-step, from the progress line)\n", it
  printf "fit process      %8.2f s  %8.1f MiB peak RSS  (two E-steps with --max-iter 1)\n", fs, fk / 1024
  printf "iteration/scan   %8.2f    (target <= 2.5)\n", it / ss
  printf "RSS fit/scan     %8.2f\n", fk / sk
}'

