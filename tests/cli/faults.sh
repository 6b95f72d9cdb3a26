#!/usr/bin/env bash
# Faults and reproducibility, end to end: a run killed by SIGTERM or SIGINT leaves no partial
# file and the previous outputs untouched; repeated runs give byte-identical data outputs.
# Usage: faults.sh TIDEMARK_BINARY TESTS_SOURCE_DIR
. "$(dirname "$0")/harness.bash" "$1"

# A genome large enough that a scan is still running when the signal arrives.
"$tm" simulate -p cpg-island --contigs 4 --length 5000000 --seed 9 -o big.fa 2>/dev/null ||
  python3 -c "import random; random.seed(9); print('>r'); print(''.join(random.choice('ACGT') for _ in range(20000000)))" > big.fa

for sig in TERM INT; do
  echo keep > calls.bed
  echo keep > summary.json
  "$tm" scan big.fa -o calls.bed --summary summary.json --posteriors post --gff3 calls.gff3 --no-progress 2>/dev/null &
  pid=$!
  # signal once the run is under way: its temporary output exists
  for _ in $(seq 200); do ls -A | grep -q 'calls.bed.tidemark-' && break; sleep 0.01; done
  kill -"$sig" "$pid"
  wait "$pid"
  code=$?
  check "SIG$sig ends the run with the signal's status" test "$code" -eq $((128 + $(kill -l "$sig")))
  check "SIG$sig leaves calls.bed untouched" grep -qx keep calls.bed
  check "SIG$sig leaves summary.json untouched" grep -qx keep summary.json
  check "SIG$sig leaves no new output" test ! -e post.cpg_island.bedgraph -a ! -e calls.gff3
  check "SIG$sig leaves no temporary file" test -z "$(ls -A | grep tidemark-)"
done

# Reproducibility: two runs, byte-identical data outputs; the report differs only in resources.
printf '>a\n' > small.fa
head -c 400000 big.fa | grep -v '>' | tr -d '\n' | fold -w 60 >> small.fa
echo >> small.fa
for run in 1 2; do  # the same command lines (they are recorded in the outputs), two folders
  mkdir -p "r$run"
  (cd "r$run" &&
    "$tm" scan ../small.fa -q -o calls.bed --posteriors p --summary s.json --gff3 c.gff3 \
      --report report.json --bed-style browser &&
    "$tm" scan ../small.fa -q -o calls.bed.gz --bgzip --posteriors z &&
    "$tm" scan ../small.fa -q -o /dev/null --posteriors w --track-format bigwig)
done
for f in calls.bed p.cpg_island.bedgraph s.json c.gff3 calls.bed.gz calls.bed.gz.tbi z.cpg_island.bedgraph.gz w.cpg_island.bw; do
  check "repeated runs give identical $f" cmp -s "r1/$f" "r2/$f"
done
strip() { python3 -c "import json,sys; d=json.load(open(sys.argv[1])); d.pop('resources'); print(json.dumps(d))" "$1"; }
check "reports differ only in resources" test "$(strip r1/report.json)" = "$(strip r2/report.json)"

finish
