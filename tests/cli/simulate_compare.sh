#!/usr/bin/env bash
# Command-line cases for `tidemark simulate` and `tidemark compare`: exit codes (README "Exit
# codes": 0 ok, 1 input, 2 usage, 3 output) and a fragment of stdout or stderr per case, plus
# two end-to-end checks of files.
# Usage: simulate_compare.sh TIDEMARK_BINARY TESTS_SOURCE_DIR
set -u
tm=$(readlink -f "$1")
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work" || exit 1

# Fixtures. Bad BED files each break one rule on a known line.
printf '# header\ntrack name=t\nc1\t0\t10\tA\nc1\t30\t20\tA\n' > start_gt_end.bed
printf 'c1\t-5\t10\tA\n' > negative.bed
printf 'c1\t0\t1e3\tA\n' > non_integer.bed
printf 'c1\t0\n' > few_columns.bed
printf 'chrom\tstart\tend\tname\nc1\t0\t10\tA\n' > bad_header.bed
printf 'c1\t0\t10\n' > unnamed.bed
printf 'c1\t0\t10\tA\nc2\t0\t5\tA\n' > calls.bed
printf 'c1\t5\t15\tA\n' > truth.bed
printf 'c1\t100\nc2\t50\n' > genome.sizes
printf 'c1\t100\n' > short.sizes

pass=0
fail=0
while IFS=$'\t' read -r name expect stream fragment command; do
  [ -z "$name" ] && continue
  case "$name" in \#*) continue ;; esac
  out=$(bash -c "${command//\$TM/\"$tm\"}" 2>"$work/.stderr")
  code=$?
  err=$(cat "$work/.stderr")
  case "$stream" in stdout) text=$out ;; stderr) text=$err ;; *) text="" ;; esac
  if [ "$code" != "$expect" ]; then
    echo "FAIL $name: exit $code, expected $expect"; echo "  command: $command"; echo "  stderr: ${err:0:400}"
    fail=$((fail + 1))
  elif [ "$stream" != "-" ] && [[ "$text" != *"$fragment"* ]]; then
    echo "FAIL $name: $stream lacks '$fragment'"; echo "  command: $command"; echo "  $stream: ${text:0:400}"
    fail=$((fail + 1))
  else
    pass=$((pass + 1))
  fi
done <<'CASES'
# name	exit	stream	fragment	command
sim_help	0	stdout	--gap-length	$TM simulate --help
sim_stdout	0	stdout	>sim1	$TM simulate --lengths 100
sim_prefix	0	stdout	>chr2	$TM simulate --contigs 2 --length 10 --prefix chr
sim_no_lengths	2	stderr	--lengths L1,L2	$TM simulate
sim_both_forms	2	stderr	usage error	$TM simulate --lengths 10 --contigs 2 --length 5
sim_contigs_alone	2	stderr	usage error	$TM simulate --contigs 2
sim_zero_contigs	2	stderr	--contigs must be at least 1	$TM simulate --contigs 0 --length 5
sim_zero_length	2	stderr	contig length 0 (entry 2)	$TM simulate --lengths 10,0
sim_gaps_range	2	stderr	--gaps 1 must be in [0, 1)	$TM simulate --lengths 10 --gaps 1
sim_gaps_too_dense	2	stderr	too large for --gap-length	$TM simulate --lengths 10 --gaps 0.9 --gap-length 2
sim_line_width	2	stderr	--line-width	$TM simulate --lengths 10 --line-width -1
sim_same_file	2	stderr	name the same file	$TM simulate --lengths 10 -o x.fa --truth x.fa
sim_unknown_profile	1	stderr	neither a built-in profile	$TM simulate -p no-such --lengths 10
sim_unwritable	3	stderr	cannot create output file	$TM simulate --lengths 10 -o no/such/dir/x.fa
sim_no_partial_output	0	-	-	$TM simulate --lengths 10 -o kept.fa --truth no/such/dir/t.bed; test ! -e kept.fa
cmp_help	0	stdout	jaccard tp/(tp+fp+fn)	$TM compare --help
cmp_ok	0	stdout	base level	$TM compare calls.bed truth.bed
cmp_genome	0	stdout	0.9000	$TM compare calls.bed truth.bed --genome genome.sizes
cmp_json	0	-	-	$TM compare calls.bed truth.bed --json out.json && grep -q '"tp": 5' out.json
cmp_start_gt_end	1	stderr	start_gt_end.bed:4: start 30 is greater than end 20	$TM compare start_gt_end.bed truth.bed
cmp_negative	1	stderr	negative.bed:1: start -5 is negative	$TM compare truth.bed negative.bed
cmp_non_integer	1	stderr	non_integer.bed:1: end '1e3' is not an integer	$TM compare non_integer.bed truth.bed
cmp_few_columns	1	stderr	few_columns.bed:1: expected at least 3	$TM compare few_columns.bed truth.bed
cmp_bad_header	1	stderr	bad_header.bed:1: start 'start' is not an integer (header lines must start with	$TM compare bad_header.bed truth.bed
cmp_unnamed	1	stderr	unnamed.bed:1: no region type in column 4; give --name	$TM compare unnamed.bed truth.bed
cmp_unnamed_name	0	stdout	any	$TM compare unnamed.bed truth.bed --name any
cmp_genome_contig	1	stderr	calls.bed:2: contig 'c2' is not in the genome file short.sizes	$TM compare calls.bed truth.bed --genome short.sizes
cmp_missing_file	1	stderr	nope.bed	$TM compare nope.bed truth.bed
cmp_both_stdin	2	stderr	both be stdin	$TM compare - - < calls.bed
cmp_stdin	0	stdout	<stdin>	cat calls.bed | $TM compare - truth.bed
cmp_merge_note	0	stderr	merged into it before scoring	printf 'c1\t0\t10\tA\nc1\t5\t12\tA\n' > m.bed; $TM compare m.bed truth.bed
CASES

# End to end: the truth of a simulation scores perfectly against itself (fp = fn = 0, accuracy 1).
"$tm" simulate --lengths 20000,5000 --gaps 0.02 --seed 5 -o s.fa --truth t.bed 2>/dev/null
"$tm" compare t.bed t.bed --genome s.fa --json self.json > /dev/null 2>&1
if grep -q '"fp": 0' self.json && ! grep -Eq '"f[pn]": [1-9]' self.json && grep -q '"accuracy": 1.0' self.json; then
  pass=$((pass + 1))
else
  echo "FAIL self_compare: the truth against itself is not perfect"; fail=$((fail + 1))
fi

echo "$pass passed, $fail failed"
[ "$fail" -eq 0 ]
