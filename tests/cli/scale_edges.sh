#!/usr/bin/env bash
# The scale edges: records past 2^29, 2^31 and 2^32 bases read by region, tabix indexes past
# 2^29, empty records (faidx, GFF3), CR-only line ends, truncated compressed input and folded
# warnings; each also with two threads and with --shard + merge. Big records are sparse files
# with a hand-written .fai (the faidx format: NAME, LENGTH, OFFSET, LINEBASES, LINEWIDTH), real
# bases only where a region is read, so the test writes a few kilobytes.
# Usage: scale_edges.sh TIDEMARK_BINARY TESTS_SOURCE_DIR
. "$(dirname "$0")/harness.bash" "$1"
fails_with() {  # fails_with NAME FRAGMENT COMMAND...: exit 1 and FRAGMENT on stderr
  local name=$1 fragment=$2
  shift 2
  "$@" > /dev/null 2> err.txt
  local code=$?
  if [ "$code" -eq 1 ] && grep -qF -- "$fragment" err.txt; then
    pass=$((pass + 1))
  else
    echo "FAIL $name: exit $code, stderr: $(head -c 300 err.txt)"
    fail=$((fail + 1))
  fi
}
same() { cmp -s "$1" "$2"; }
same_data() { cmp -s <(grep -v '^#' "$1") <(grep -v '^#' "$2"); }  # BED headers name the command

# --- A 4,400,000,100-bp record (past 2^32), sparse: bases only in two windows -------------
# Window A: 1-based 2,200,000,001-2,200,010,000 (past 2^31); window B: the last 10,100 bases,
# 4,399,990,001-4,400,000,100 (past 2^32). Lines of 1,000 bases; the file is 4.4 GB apparent.
python3 - <<'PY'
import random
length, width, header = 4_400_000_100, 1000, b">sim1\n"
random.seed(23)
def window(first, last):  # 1-based inclusive, whole lines
    return first, "".join(random.choice("ACGTN" if i % 997 else "N") for i in range(first, last + 1))
windows = [window(2_200_000_001, 2_200_010_000), window(4_399_990_001, length)]
size = len(header) + (length // width) * (width + 1) + (length % width + 1)
with open("big.fa", "wb") as f:
    f.write(header)
    for first, bases in windows:
        assert (first - 1) % width == 0
        f.seek(len(header) + (first - 1) // width * (width + 1))
        f.write(b"".join(bases[i:i + width].encode() + b"\n" for i in range(0, len(bases), width)))
    f.truncate(size)
with open("big.fa.fai", "w") as f:  # written after the FASTA: newer, so it is used
    f.write(f"sim1\t{length}\t{len(header)}\t{width}\t{width + 1}\n")
for name, (first, bases) in zip("AB", windows):  # the oracle: the bases written
    with open(f"window{name}.counts", "w") as f:
        f.write(" ".join(str(bases.count(c)) for c in "ACGTN") + "\n")
PY
A=sim1:2,200,000,001-2,200,010,000
B=sim1:4399990001-4400000100

# The region's summary entry and bedGraph against the bases written (python above).
region_ok() {  # region_ok SUMMARY BEDGRAPH COUNTS BEGIN END
  python3 - "$@" <<'PY'
import json, sys
summary, bedgraph, counts, begin, end = sys.argv[1:]
c = json.load(open(summary))["contigs"][0]
a, cc, g, t, n = [int(x) for x in open(counts).read().split()]
want = (n, (cc + g) / (a + cc + g + t))
got = (c["unknown_bases"], c["gc_fraction"])
rows = [l.split("\t") for l in open(bedgraph) if not l.startswith(("track", "#"))]
ok = (c["offset"] == int(begin) and c["length"] == int(end) - int(begin) and got[0] == want[0]
      and abs(got[1] - want[1]) < 1e-12 and int(rows[0][1]) == int(begin)
      and int(rows[-1][2]) == int(end))
if not ok:
    print(f"offset {c['offset']} length {c['length']} unknown, GC {got} (want {want}), "
          f"bedGraph {rows[0][1]}..{rows[-1][2]} (want {begin}..{end})")
sys.exit(0 if ok else 1)
PY
}
run() { "$tm" scan big.fa -q --no-progress "$@"; }
run -r "$A" -o a.bed --summary a.json --posteriors a
check "past 2^31: -r reads the right bases and reports their coordinates" \
  region_ok a.json a.cpg_island.bedgraph windowA.counts 2200000000 2200010000
run -r "$B" -o b.bed --summary b.json --posteriors b
check "past 2^32: -r reads the right bases and reports their coordinates" \
  region_ok b.json b.cpg_island.bedgraph windowB.counts 4399990000 4400000100
printf 'sim1\t4399990000\t4400000100\n' > b_regions.bed
run --regions-bed b_regions.bed -o bb.bed --posteriors bb
check "past 2^32: --regions-bed gives what -r gives" same bb.cpg_island.bedgraph b.cpg_island.bedgraph
run -r "$B" -t 2 -o b2.bed --posteriors b2
check "past 2^32: -t 2 gives the same track" same b2.cpg_island.bedgraph b.cpg_island.bedgraph
check "past 2^32: -t 2 gives the same calls" same_data b2.bed b.bed
fails_with "past 2^32: the length is 64-bit in the message" \
  "start 4400000101 is past the end of 'sim1', which has 4400000100 bp" run -r sim1:4400000101-4400000200
fails_with "past 2^32: a BED region past the end names the 64-bit length" "which has 4400000100 bp" \
  sh -c "printf 'sim1\t4400000000\t4400000101\n' > over.bed && '$tm' scan big.fa -q --regions-bed over.bed"

# Sharded: each shard in its own folder, then merge; equal to one run over both regions.
run -r "$A" -r "$B" -o ab.bed --posteriors ab
for i in 1 2; do
  mkdir -p s$i && (cd s$i && "$tm" scan ../big.fa -q --no-progress -r "$A" -r "$B" --shard $i/2 \
    -o calls.bed --summary summary.json --posteriors post)
done
"$tm" merge -q --shard-summaries s1/summary.json s2/summary.json --shard-beds s1/calls.bed s2/calls.bed \
  --shard-posteriors s1/post s2/post -o merged.bed --posteriors merged 2> /dev/null
check "past 2^32: --shard 1/2, 2/2 + merge give one run's calls" same_data merged.bed ab.bed
check "past 2^32: --shard 1/2, 2/2 + merge give one run's track" \
  same merged.cpg_island.bedgraph ab.cpg_island.bedgraph

# bigWig coordinates are 32-bit: refused as soon as the record's length is known.
for extra in "" "-t 2" "--shard 2/2"; do
  fails_with "bigWig past 2^32 refused before decoding ($extra)" \
    "more than the 4294967295 bp a bigWig's 32-bit coordinates can hold" \
    run -r "$A" -r "$B" $extra -o /dev/null --posteriors bw --track-format bigwig
  check "bigWig past 2^32 leaves no file ($extra)" test ! -e bw.cpg_island.bw
done

# --- tabix past 2^29: a CSI index (a .tbi cannot hold such positions); tabix is the oracle ----
echo stale > z.cpg_island.bedgraph.gz.tbi  # an earlier run's index, which tabix would prefer
run -r "$A" --bgzip -o z.bed.gz --posteriors z
check "past 2^29: the bedGraph gets a .csi index" test -s z.cpg_island.bedgraph.gz.csi
check "past 2^29: the calls get a .csi index" test -s z.bed.gz.csi
check "past 2^29: no .tbi beside a .csi (the earlier one is removed)" \
  test ! -e z.cpg_island.bedgraph.gz.tbi -a ! -e z.bed.gz.tbi
tabix_ok() {  # tabix_ok FILE.gz PLAIN REGION BEGIN END: tabix's answer = the plain file's lines
  tabix "$1" "$3" > got.txt && [ -s got.txt ] &&
    awk -F'\t' -v b="$4" -v e="$5" '!/^(#|track)/ && $2 < e && $3 > b' "$2" > want.txt &&
    cmp -s got.txt want.txt
}
check "past 2^29: tabix answers a query from the .csi" \
  tabix_ok z.cpg_island.bedgraph.gz a.cpg_island.bedgraph sim1:2200005001-2200005100 2200005000 2200005100
for i in 1 2; do
  (cd s$i && "$tm" scan ../big.fa -q --no-progress -r "$A" -r "$B" --shard $i/2 --bgzip \
    -o calls.bed.gz --summary summary.json --posteriors post)
done
"$tm" merge -q --shard-summaries s1/summary.json s2/summary.json \
  --shard-beds s1/calls.bed.gz s2/calls.bed.gz --shard-posteriors s1/post s2/post -o zm.bed.gz \
  --posteriors zm --bgzip
check "past 2^32: merge --bgzip indexes with CSI; tabix answers" \
  tabix_ok zm.cpg_island.bedgraph.gz ab.cpg_island.bedgraph sim1:4400000001-4400000100 4400000000 4400000100
check "past 2^32: a shard's --bgzip calls get a .csi" test -s s2/calls.bed.gz.csi -o -s s1/calls.bed.gz.csi
check "past 2^32: the merged calls get a .csi; tabix answers" \
  tabix_ok zm.bed.gz ab.bed sim1:4399990001-4400000100 4399990000 4400000100

# --- Empty records: faidx, -r, GFF3 -------------------------------------------------------
python3 - <<'PY'
import random
random.seed(5)
def bases(n):
    return "".join(random.choice("ACGT") for _ in range(n))
def lines(s, w=60):
    return "".join(s[i:i + w] + "\n" for i in range(0, len(s), w))
recs = [("a", bases(3000)), ("e1", ""), ("b", "CG" * 700 + bases(900)), ("last", "")]
open("empties.fa", "w").write("".join(f">{n}\n{lines(s)}" for n, s in recs))
PY
"$tm" scan empties.fa -q -r a:1-2000 -o r.bed > /dev/null 2> err.txt
check "an empty last record: the file is indexed and read by region" test -s empties.fa.fai
for extra in "" "-t 2" "--shard 1/2"; do
  fails_with "-r on an empty record says so ($extra)" "record 'e1' of empties.fa is empty (0 bases)" \
    "$tm" scan empties.fa -q $extra -r e1 -o none.bed
  fails_with "-r on an empty last record says so ($extra)" \
    "record 'last' of empties.fa is empty (0 bases)" "$tm" scan empties.fa -q $extra -r last:1-10 -o none.bed
  check "-r on an empty record leaves no output ($extra)" test ! -e none.bed
done
"$tm" scan empties.fa -q -o e.bed --gff3 e.gff3 2> /dev/null
check "GFF3 with empty records passes gt gff3validator" gt gff3validator e.gff3 > /dev/null
check "GFF3: no sequence-region for an empty record" sh -c '! grep -q "sequence-region e1" e.gff3'
"$tm" scan empties.fa -q -t 2 --gff3 e2.gff3 -o /dev/null 2> /dev/null
check "GFF3 with empty records, -t 2: the same file" same e2.gff3 e.gff3
for i in 1 2 3; do
  mkdir -p g$i && (cd g$i && "$tm" scan ../empties.fa -q --shard $i/3 -o calls.bed --gff3 calls.gff3 \
    --summary summary.json 2> /dev/null)
done
"$tm" merge -q --shard-summaries g{1,2,3}/summary.json --shard-beds g{1,2,3}/calls.bed \
  --shard-gff3 g{1,2,3}/calls.gff3 -o /dev/null --gff3 em.gff3
check "GFF3 with empty records, --shard 1..3/3 + merge: the same file" same em.gff3 e.gff3

# --- CR-only line ends: indexed and read by region like the LF file -----------------------
tr '\n' '\r' < empties.fa > cr.fa
"$tm" scan empties.fa -q -r a:101-2900 -r b -o lf.bed --posteriors lf
"$tm" scan cr.fa -q -r a:101-2900 -r b -o cr.bed --posteriors cr
check "CR-only line ends: -r gives the LF file's track" same cr.cpg_island.bedgraph lf.cpg_island.bedgraph
check "CR-only line ends: -r gives the LF file's calls" same_data cr.bed lf.bed
"$tm" scan cr.fa -q -t 2 -r a:101-2900 -r b -o cr2.bed
check "CR-only line ends: -t 2 the same" same_data cr2.bed lf.bed
for i in 1 2; do
  mkdir -p cr$i && (cd cr$i && "$tm" scan ../cr.fa -q --shard $i/2 -r a:101-2900 -r b -o calls.bed \
    --summary summary.json --posteriors post 2> /dev/null)
done
"$tm" merge -q --shard-summaries cr{1,2}/summary.json --shard-beds cr{1,2}/calls.bed \
  --shard-posteriors cr{1,2}/post -o crr.bed --posteriors crr 2> /dev/null
check "CR-only line ends: -r with --shard + merge the same track" \
  same crr.cpg_island.bedgraph lf.cpg_island.bedgraph
for i in 1 2; do "$tm" scan cr.fa -q --shard $i/2 -o crs$i.bed --summary crs$i.json 2> /dev/null; done
"$tm" scan empties.fa -q -o lfall.bed 2> /dev/null
"$tm" merge -q --shard-summaries crs1.json crs2.json --shard-beds crs1.bed crs2.bed -o crm.bed 2> /dev/null
check "CR-only line ends: --shard + merge give the LF file's calls" same_data crm.bed lfall.bed

# --- Truncated compressed input: an error naming the file, for every compression ----------
python3 -c "
import random
random.seed(3)
print(''.join(f'>r{i}\n' + ''.join(random.choice('ACGT') for _ in range(1000)) + '\n' for i in range(2000)), end='')
" > many.fa
gzip -c many.fa > many.fa.gz
bgzip -c many.fa > many.fa.bgz.gz
xz -c many.fa > many.fa.xz
bzip2 -c many.fa > many.fa.bz2
zstd -q -c many.fa > many.fa.zst
for f in many.fa.gz many.fa.bgz.gz many.fa.xz many.fa.bz2 many.fa.zst; do
  size=$(stat -c %s "$f")
  head -c $((size / 2)) "$f" > "cut.$f"
  for extra in "" "-t 2" "--shard 1/2"; do
    fails_with "truncated $f is an error naming it ($extra)" "cut.$f" \
      "$tm" scan "cut.$f" -q --no-progress $extra -o cut.bed
    check "truncated $f leaves no output ($extra)" test ! -e cut.bed
  done
done
check "a whole .zst file still reads" bash -c "'$tm' scan many.fa.zst -q -o whole.bed 2>/dev/null && '$tm' scan many.fa -q -o plain.bed 2>/dev/null && diff -q <(grep -v ^# whole.bed) <(grep -v ^# plain.bed)"

# --- Repeated warnings folded into a count -------------------------------------------------
{
  for i in $(seq 1 60); do printf '>e%d\n' "$i"; done
  printf '>x\nACGTACGTACGTACGTACGTACGTACGTACGTACGTACGT\n'
} > empty60.fa
for extra in "" "-q" "-t 2" "--shard 1/1"; do
  "$tm" scan empty60.fa $extra --no-progress -o /dev/null 2> warn.txt
  check "60 empty records: 5 named ($extra)" test "$(grep -c "is empty; no calls" warn.txt)" -eq 5
  check "60 empty records: then one count line ($extra)" \
    grep -qF "55 more empty records (60 in all; only the first 5 are listed)" warn.txt
done

finish
