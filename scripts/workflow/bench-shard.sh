#!/usr/bin/env bash
# Per-shard throughput that sizes a cluster job: human chrX (Debian smalt-examples, 70 Mbp) cut
# into ten records, bgzip-compressed, shard 3/4 decoded with each built-in profile on one thread
# (-t 1); best of 3.
# Usage: scripts/workflow/bench-shard.sh [PATH_TO_TIDEMARK] [WORKDIR]
set -euo pipefail
TM=$(realpath "${1:-build/tidemark}")
WORK=${2:-$(mktemp -d /tmp/tidemark-bench-shard-XXXXXX)}
CHRX=/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz
mkdir -p "$WORK" && cd "$WORK"
if [ ! -s chrX10.fa.gz ]; then
  /usr/bin/python3 - "$CHRX" <<'PY'
import gzip, sys
seq = []
with gzip.open(sys.argv[1], "rt") as f:
    for line in f:
        if not line.startswith(">"):
            seq.append(line.strip())
s = "".join(seq)
step = (len(s) + 9) // 10
with open("chrX10.fa", "w") as out:
    for i in range(10):
        part = s[i * step:(i + 1) * step]
        out.write(f">piece{i + 1}\n")
        for j in range(0, len(part), 60):
            out.write(part[j:j + 60] + "\n")
PY
  bgzip -f chrX10.fa
fi
measure() {  # LABEL COMMAND...: best wall of 3 and its CPU time, as Mbp/s of shard 3/4
  local label=$1 best="" bestc="" w u s
  shift
  for _ in 1 2 3; do
    /usr/bin/time -f "%e %U %S" -o time.txt "$@"
    read -r w u s < time.txt
    if [ -z "$best" ] || awk "BEGIN{exit !($w < $best)}"; then best=$w; bestc=$(awk "BEGIN{print $u+$s}"); fi
  done
  awk -v l="$label" -v w="$best" -v c="$bestc" -v b="$BASES" \
    'BEGIN{printf "%s: %.1f Mbp, best wall %.2f s (%.1f Mbp/s), CPU %.2f s (%.1f Mbp per CPU-second)\n", l, b/1e6, w, b/1e6/w, c, b/1e6/c}'
}
"$TM" scan chrX10.fa.gz --shard 3/4 -o calls.bed --summary summary.json -q
BASES=$(/usr/bin/python3 -c "import json; print(json.load(open('summary.json'))['genome']['length'])")
for p in cpg-island gc-shift isochore; do
  measure "scan -p $p --shard 3/4" "$TM" scan chrX10.fa.gz -p "$p" --shard 3/4 -t 1 -o calls.bed -q
  measure "scan -p $p --shard 3/4 --posteriors" "$TM" scan chrX10.fa.gz -p "$p" --shard 3/4 -t 1 -o calls.bed --posteriors post -q
  measure "fit -p $p --emit-stats --shard 3/4" "$TM" fit chrX10.fa.gz -p "$p" --shard 3/4 -t 1 --emit-stats stats.json -q
done
