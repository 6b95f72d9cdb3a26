#!/usr/bin/env bash
# Speed of the default cpg-island profile beside the two-state cpg-island-2state in the same run:
# `tidemark scan -t 1` of human chrX (70 Mbp, Debian smalt-examples) to BED with each profile,
# alternating, fastest of N runs each; prints Mbp/s and the ratio, and fails when the default is
# more than 3x slower (issue 12's limit).
# Usage: bash scripts/bench-cpg.sh BUILD/tidemark [REPEATS=3] [FASTA]
set -euo pipefail
tm=$(readlink -f "$1")
repeats=${2:-3}
fasta=${3:-/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz}
[ -r "$fasta" ] || { echo "bench-cpg: $fasta missing (scripts/install-deps.sh installs smalt-examples)" >&2; exit 1; }
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
bases=$("$tm" scan -q -t 1 -p cpg-island-2state "$fasta" -o /dev/null --summary "$work/s.json" &&
        python3 -c "import json; print(json.load(open('$work/s.json'))['genome']['length'])")
declare -A best
for ((i = 0; i < repeats; i++)); do
    for p in cpg-island-2state cpg-island; do
        t0=$(date +%s%N)
        "$tm" scan -q -t 1 -p "$p" "$fasta" -o "$work/$p.bed"
        t1=$(date +%s%N)
        ns=$((t1 - t0))
        if [ -z "${best[$p]:-}" ] || [ "$ns" -lt "${best[$p]}" ]; then best[$p]=$ns; fi
    done
done
python3 - "$bases" "${best[cpg-island-2state]}" "${best[cpg-island]}" "$fasta" "$repeats" <<'PY'
import sys
bases, two, new, fasta, repeats = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3]), sys.argv[4], sys.argv[5]
mbps = lambda ns: bases / 1e6 / (ns / 1e9)
print(f"input {fasta}: {bases} bp; tidemark scan -t 1 to BED, fastest of {repeats} runs each, same run")
print(f"cpg-island-2state  {two / 1e9:7.2f} s  {mbps(two):7.1f} Mbp/s")
print(f"cpg-island         {new / 1e9:7.2f} s  {mbps(new):7.1f} Mbp/s")
ratio = new / two
print(f"cpg-island takes {ratio:.2f}x the time of cpg-island-2state (limit 3x)")
sys.exit(0 if ratio <= 3 else 1)
PY
