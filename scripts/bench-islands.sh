#!/usr/bin/env bash
# Benchmark of the bacterial-islands recipes (issue 21's speed targets), one thread throughout:
#  1. fit + scan of E. coli 536 (Debian bowtie-examples, 4.9 Mbp) with the signature template
#     composition-shift against the G+C template gc-shift: target <= 3x gc-shift's time;
#  2. scanning a fragmented draft (300,000 contigs of 700 bp) against 105 contigs of 2 Mbp, both
#     simulated from the fitted composition-shift profile (210 Mbp each): target >= 0.8x the
#     per-base speed of the 2-Mbp contigs.
# Fastest of N rounds (default 3), the two sides of each comparison alternating within a round;
# CPU = user + system seconds from GNU time (less sensitive to other work on the machine than wall).
# Usage: scripts/bench-islands.sh [TIDEMARK_BINARY] [ROUNDS]
set -euo pipefail

bin=${1:-build/tidemark}
rounds=${2:-3}
genome=/usr/share/doc/bowtie/examples/genomes/NC_008253.fna.gz
[ -x "$bin" ] || { echo "bench-islands: no tidemark binary at $bin (build first)" >&2; exit 1; }
[ -r "$genome" ] || { echo "bench-islands: cannot read $genome (apt-get install bowtie-examples)" >&2; exit 1; }
[ -x /usr/bin/time ] || { echo "bench-islands: needs /usr/bin/time (apt-get install time)" >&2; exit 1; }
log() { echo "bench-islands: $*" >&2; }

work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

# timed NAME CMD...: runs CMD, appends "wall cpu" to $work/NAME.times.
timed() {
    local name=$1; shift
    /usr/bin/time -f '%e %U %S' -o "$work/time" "$@" >/dev/null
    awk '{ printf "%.2f %.2f\n", $1, $2 + $3 }' "$work/time" >>"$work/$name.times"
}
# fit_and_scan TEMPLATE: one fit + scan of the genome, both timed under the template's name.
fit_and_scan() {
    timed "$1.fit" "$bin" fit -q -t 1 "$genome" -p "$1" -o "$work/$1.json"
    timed "$1.scan" "$bin" scan -q -t 1 "$genome" -p "$work/$1.json" -o "$work/$1.bed"
}
# best NAME COLUMN: the smallest value of a column (1 wall, 2 CPU) over the rounds.
best() { sort -g -k"$2,$2" "$work/$1.times" | head -1 | awk -v c="$2" '{ print $c }'; }

log "fit + scan of E. coli 536 with gc-shift and composition-shift ($rounds rounds, alternating)"
for ((r = 1; r <= rounds; r++)); do
    fit_and_scan gc-shift
    fit_and_scan composition-shift
done

log "simulating a 300,000-contig draft and 105 x 2 Mbp from the fitted composition-shift profile"
profile=$work/composition-shift.json
"$bin" simulate -q -p "$profile" --seed 5 --contigs 300000 --length 700 -o "$work/draft.fa"
"$bin" simulate -q -p "$profile" --seed 5 --contigs 105 --length 2000000 -o "$work/mid.fa"
log "scanning both ($rounds rounds, alternating)"
for ((r = 1; r <= rounds; r++)); do
    timed draft "$bin" scan -q -t 1 "$work/draft.fa" -p "$profile" -o "$work/draft.bed"
    timed mid "$bin" scan -q -t 1 "$work/mid.fa" -p "$profile" -o "$work/mid.bed"
done

sum() { awk -v a="$(best "$1.fit" "$2")" -v b="$(best "$1.scan" "$2")" 'BEGIN { printf "%.2f", a + b }'; }
gc_wall=$(sum gc-shift 1) gc_cpu=$(sum gc-shift 2)
cs_wall=$(sum composition-shift 1) cs_cpu=$(sum composition-shift 2)
draft_wall=$(best draft 1) draft_cpu=$(best draft 2) mid_wall=$(best mid 1) mid_cpu=$(best mid 2)
failed=0
{
    echo "### Bacterial-islands recipes, one thread"
    echo
    echo "$(date -u '+%Y-%m-%d %H:%M UTC'); $(nproc) cores shared with other work; fastest of $rounds rounds,"\
         "alternating; CPU = user + system s."
    echo
    echo "| run | wall s | CPU s |"
    echo "|---|---:|---:|"
    echo "| gc-shift: fit + scan E. coli 536 | $gc_wall | $gc_cpu |"
    echo "| composition-shift: fit + scan E. coli 536 | $cs_wall | $cs_cpu |"
    echo "| composition-shift scan, draft 300,000 x 700 bp (210 Mbp) | $draft_wall | $draft_cpu |"
    echo "| composition-shift scan, 105 x 2 Mbp (210 Mbp) | $mid_wall | $mid_cpu |"
    echo
    awk -v c="$cs_cpu" -v g="$gc_cpu" -v cw="$cs_wall" -v gw="$gc_wall" 'BEGIN {
        r = c / g; printf "- %s: composition-shift fit + scan %.2fx gc-shift'"'"'s CPU time (wall %.2fx; target <= 3x)\n",
            (r <= 3 ? "met" : "**MISSED**"), r, cw / gw; exit !(r <= 3) }' || failed=1
    awk -v d="$draft_cpu" -v m="$mid_cpu" -v dw="$draft_wall" -v mw="$mid_wall" 'BEGIN {
        r = m / d; printf "- %s: the draft scans at %.2fx the per-base speed of 2-Mbp contigs, CPU (wall %.2fx; target >= 0.8x)\n",
            (r >= 0.8 ? "met" : "**MISSED**"), r, mw / dw; exit !(r >= 0.8) }' || failed=1
    echo
    echo "Command: scripts/bench-islands.sh $bin $rounds"
}
exit $failed
