#!/usr/bin/env bash
# Per-shard throughput that sizes a cluster job: human chrX (Debian smalt-examples, 70 Mbp) cut
# into ten records, bgzip-compressed, shard 3/4 decoded with each built-in profile on one thread
# (-t 1); best of 3. Then all of chrX as one record split over 4 shards (seams step + decoding
# step per shard) against one unsharded run.
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
# gc-shift is a template that scan refuses until fitted: its seeded start stands in for it.
"$TM" fit chrX10.fa.gz -p gc-shift --max-iter 0 -o gc-shift-start.json -q
for p in cpg-island gc-shift-start.json isochore; do
  measure "scan -p $p --shard 3/4" "$TM" scan chrX10.fa.gz -p "$p" --shard 3/4 -t 1 -o calls.bed -q
  measure "scan -p $p --shard 3/4 --posteriors" "$TM" scan chrX10.fa.gz -p "$p" --shard 3/4 -t 1 -o calls.bed --posteriors post -q
  measure "fit -p $p --emit-stats --shard 3/4" "$TM" fit chrX10.fa.gz -p "$p" --shard 3/4 -t 1 --emit-stats stats.json -q
done

# One long record split between shards: all of chrX (70 Mbp) as one record over 4 shards. Step 1
# (seams) and step 2 (decoding) of each shard, one thread each, against one unsharded run; the
# makespan is the slowest shard's step 1 + step 2 (shards run in parallel on a cluster).
if [ ! -s chrX1.fa.gz ]; then zcat "$CHRX" | bgzip > chrX1.fa.gz; fi
time_of() {  # COMMAND...: best wall of 3 runs, in seconds
  local best="" w
  for _ in 1 2 3; do
    /usr/bin/time -f "%e" -o time.txt "$@"
    w=$(cat time.txt)
    if [ -z "$best" ] || awk "BEGIN{exit !($w < $best)}"; then best=$w; fi
  done
  echo "$best"
}
single=$(time_of "$TM" scan chrX1.fa.gz -t 1 -o calls.bed -q)
seams=()
for i in 1 2 3 4; do
  s1[$i]=$(time_of "$TM" scan chrX1.fa.gz --shard "$i/4" -t 1 --emit-seams "seams.$i.json" -q)
  seams+=(--seams "seams.$i.json")
done
makespan=0
for i in 1 2 3 4; do
  s2=$(time_of "$TM" scan chrX1.fa.gz --shard "$i/4" -t 1 "${seams[@]}" -o "calls.$i.bed" -q)
  echo "chrX as one record, shard $i/4: seams ${s1[$i]} s, decoding $s2 s"
  makespan=$(awk -v m="$makespan" -v a="${s1[$i]}" -v b="$s2" 'BEGIN{t=a+b; print (t>m)?t:m}')
done
awk -v s="$single" -v m="$makespan" \
  'BEGIN{printf "chrX as one record: unsharded %.2f s; 4 shards: slowest shard %.2f s (speed-up %.2fx; with whole records one shard takes all %.2f s)\n", s, m, s/m, s}'
