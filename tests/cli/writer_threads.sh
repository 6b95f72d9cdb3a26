#!/usr/bin/env bash
# The writers with their threads busy: scans with every output (bgzip BED and bedGraph with their
# tabix indexes, bigWig, GFF3, summary, report, HTML, chrom sizes) of one long record decoded
# alone in segments (its first segments swept while it is read, its tracks written as they are
# joined) and of many short records decoded side by side, with --threads 1 to 4. Every file must
# be the same as with one thread (the report's and page's run times apart), and each tabix index
# the one the tabix command (htslib) builds from the same file. The ThreadSanitizer pass of
# scripts/test.sh runs it too.
# Usage: writer_threads.sh TIDEMARK_BINARY TESTS_SOURCE_DIR
. "$(dirname "$0")/harness.bash" "$1"
"$tm" simulate --contigs 1 --length 1500000 --seed 11 -q -o long.fa || exit 1
"$tm" simulate --contigs 12 --length 60000 --seed 12 -q -o many.fa || exit 1
scan() {  # scan INPUT THREADS FOLDER
  mkdir -p "$3" && (
    cd "$3" &&
      "$tm" scan -q -t "$2" --block 2000 "../$1" --bgzip -o calls.bed.gz --bed-style browser \
        --posteriors p --posterior-digits 6 --gff3 calls.gff3 --summary s.json --report r.json \
        --html r.html --chrom-sizes sizes.txt &&
      "$tm" scan -q -t "$2" --block 2000 "../$1" -o bw.bed --posteriors bw --track-format bigwig
  )
}
same_as_tabix() {  # same_as_tabix FILE SKIP: FILE.tbi equals tabix -p bed -S SKIP of FILE's copy
  cp "$1" "tabix.$(basename "$1")" && tabix -f -p bed -S "$2" "tabix.$(basename "$1")" &&
    cmp -s <(gzip -dc "$1.tbi") <(gzip -dc "tabix.$(basename "$1").tbi")
}
outputs="calls.bed.gz calls.bed.gz.tbi p.cpg_island.bedgraph.gz p.cpg_island.bedgraph.gz.tbi
calls.gff3 s.json sizes.txt bw.bed bw.cpg_island.bw"
for input in long many; do
  for t in 1 2 3 4; do
    check "$input -t $t runs" scan "$input.fa" "$t" "$input.t$t"
  done
  check "$input: bedGraph large enough for many BGZF blocks" \
    test "$(gzip -dc "$input.t1/p.cpg_island.bedgraph.gz" | wc -c)" -gt 500000
  for t in 1 3; do
    check "$input -t $t: BED index is tabix's" same_as_tabix "$input.t$t/calls.bed.gz" 1
    check "$input -t $t: bedGraph index is tabix's" \
      same_as_tabix "$input.t$t/p.cpg_island.bedgraph.gz" 0
  done
  for t in 2 3 4; do
    for f in $outputs; do
      check "$input -t $t: $f as with -t 1" cmp -s "$input.t1/$f" "$input.t$t/$f"
    done
  done
done
finish
