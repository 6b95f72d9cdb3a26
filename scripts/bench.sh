#!/usr/bin/env bash
# Benchmark: `tidemark scan -p cpg-island-2state` to BED against a deliberately simple baseline decoder
# (scripts/bench/baseline.cpp), both on one thread, on seeded synthetic genomes and on real
# human chrX; then tidemark's speed-up with 2 threads over 1 on many contigs and on one 100 Mbp
# contig; prints Markdown tables and writes them to BUILD_DIR/bench-results.md.
set -euo pipefail

usage() {
    cat <<'EOF'
usage: scripts/bench.sh [--quick] [--repeats N] [--build-dir DIR] [--no-real] [--threads-only]
                        [--shapes-only] [--outputs-only] [--python-only] [--compare OLD_TIDEMARK]

Builds tidemark (Release) and the benchmark helpers in DIR (default: build-bench at the top of
the repository), checks on a small input that tidemark and the baseline agree (posteriors to
1e-9, log-likelihoods, calls), then times both on synthetic genomes of 1, 10, 50 and 200 Mbp
(one contig each; --quick stops at 50 Mbp) and on human chrX from Debian's smalt-examples
(--no-real skips it). Each input runs N times (default 3, 2 with --quick; at least 5 below
50 Mbp), tidemark and baseline alternating; the fastest run of each is reported.

Threads: tidemark with --threads 1 and --threads 2 (alternating, N runs each, fastest kept) on
100 contigs of 1 Mbp (decoded in parallel, one contig per thread) and on one contig of 100 Mbp
(decoded in parallel segments); targets 1.8x and 1.5x. --threads-only runs only this part.

Input shapes: tidemark scan -p cpg-island on a fragmented draft (300,000 contigs of 700 bp), on
105 contigs of 2 Mbp (both simulated with -p cpg-island --seed 5, 210 Mbp each) and on human
chrX as .fa.gz and as plain text, with 1 and 2 threads; the draft also with --summary and
bedGraph tracks (peak RSS) and with bigWig tracks; 3,000,000 records of 100-300 bp (cut from
one simulated sequence, --seed 23; scripts/bench/many-records.py) once with --summary and
bedGraph tracks (time, peak RSS, summary size). Targets: draft Mbp/s >= 0.8x that of the
2-Mbp contigs (1 thread); 2 threads >= 1.8x over 1 on the draft, the 2-Mbp contigs and chrX
.fa.gz; chrX .fa.gz within 1.15x of plain text (2 threads); draft RSS <= 64 MiB + 100 B per
contig (also for the 3 M records); bigWig within 2x of bedGraph. --shapes-only runs only this part. --compare OLD_TIDEMARK
also times another build (e.g. of an earlier commit) with 1 thread on each shape, alternating
with this one, and reports this build's speed over it.

Outputs: tidemark scan -p cpg-island -t 2 on human chrX .fa.gz writing BED only, then each
output of a browser-ready run (--bgzip BED, bedGraph with and without --bgzip, bigWig, summary
and report, HTML, GFF3, and all of them with chrom sizes), all rows alternating in each of N
rounds, fastest kept, each as a ratio to BED only. Targets: all <= 1.3x, bigWig <= 1.15x, bgzip
bedGraph <= 1.2x. --outputs-only runs only this part.

Python (with pybind11 installed): tidemark.decode_file on human chrX .fa.gz, one thread, with
float64, float32 and no posterior arrays, each alternating with tidemark scan -t 1 to BED, N
runs each, fastest kept; target float64 >= 0.9x the command line's speed. --python-only runs
only this part.
EOF
}

ROOT=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
BUILD=$ROOT/build-bench
QUICK=0
REPEATS=""
REAL=1
THREADS_ONLY=0
SHAPES_ONLY=0
OUTPUTS_ONLY=0
PYTHON_ONLY=0
COMPARE=""
while [ $# -gt 0 ]; do
    case "$1" in
        --quick) QUICK=1 ;;
        --repeats) REPEATS=${2:?--repeats needs a number}; shift ;;
        --build-dir) BUILD=${2:?--build-dir needs a directory}; shift ;;
        --no-real) REAL=0 ;;
        --threads-only) THREADS_ONLY=1 ;;
        --shapes-only) SHAPES_ONLY=1 ;;
        --outputs-only) OUTPUTS_ONLY=1 ;;
        --python-only) PYTHON_ONLY=1 ;;
        --compare) COMPARE=${2:?--compare needs a tidemark binary}; shift ;;
        -h|--help) usage; exit 0 ;;
        *) echo "bench: unknown argument '$1'" >&2; usage >&2; exit 2 ;;
    esac
    shift
done
if [ -z "$REPEATS" ]; then REPEATS=$([ $QUICK -eq 1 ] && echo 2 || echo 3); fi
case "$REPEATS" in ''|*[!0-9]*|0) echo "bench: --repeats must be a positive integer" >&2; exit 2 ;; esac
SIZES_MBP=(1 10 50 200)
[ $QUICK -eq 1 ] && SIZES_MBP=(1 10 50)
CHRX=/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz
PROFILE_JSON=$ROOT/data/profiles/cpg-island-2state.json
DATA=$BUILD/bench-data
RESULTS=$BUILD/bench-results.md
log() { echo "bench: $*" >&2; }

# --- tools and builds ---------------------------------------------------------------------
if [ ! -x /usr/bin/time ] || [ ! -x /usr/bin/python3 ]; then
    log "installing missing packages (GNU time, python3) with scripts/install-deps.sh"
    "$ROOT/scripts/install-deps.sh"
fi
log "building tidemark (Release) in $BUILD"
# With pybind11 (scripts/install-deps.sh) the Python module is built too, for the comparison of
# its decoding with the command line's; the library is then compiled as position-independent code
# for both.
PYTHON_MODULE=0
[ -r /usr/lib/cmake/pybind11/pybind11Config.cmake ] && PYTHON_MODULE=1
cmake -S "$ROOT" -B "$BUILD" -DCMAKE_BUILD_TYPE=Release -DTIDEMARK_BUILD_PYTHON=$([ $PYTHON_MODULE -eq 1 ] && echo ON || echo OFF) >/dev/null
cmake --build "$BUILD" -j2 --target tidemark_cli $([ $PYTHON_MODULE -eq 1 ] && echo tidemark_python) >/dev/null
log "building the generator and the baseline in $BUILD/bench-tools"
cmake -S "$ROOT/scripts/bench" -B "$BUILD/bench-tools" -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build "$BUILD/bench-tools" -j2 >/dev/null
TM=$BUILD/tidemark
BL=$BUILD/bench-tools/bench-baseline
GEN=$BUILD/bench-tools/bench-genome
mkdir -p "$DATA"

# --- correctness first: the speed comparison means nothing if the answers differ -------------
check() {  # name fasta
    local name=$1 fasta=$2 out=$DATA/check.$1
    "$TM" scan -q -t 1 -p cpg-island-2state "$fasta" -o "$out.tm.bed" --posteriors "$out.tm" \
        --posterior-digits 12 --summary "$out.tm.json"
    "$BL" --profile "$PROFILE_JSON" "$fasta" -o "$out.bl.bed" --posteriors "$out.bl.tsv" 2>"$out.bl.log"
    printf 'agreement on %s: ' "$name" >&2
    /usr/bin/python3 "$ROOT/scripts/bench/check_agreement.py" --tidemark-bedgraph "$out.tm.cpg_island.bedgraph" \
        --tidemark-summary "$out.tm.json" --tidemark-bed "$out.tm.bed" \
        --baseline-posteriors "$out.bl.tsv" --baseline-log "$out.bl.log" --baseline-bed "$out.bl.bed" \
        --fasta "$fasta" --tolerance 1e-9 | tee -a "$DATA/agreement.txt" >&2
}
: >"$DATA/agreement.txt"
if [ $THREADS_ONLY -eq 0 ] && [ $SHAPES_ONLY -eq 0 ] && [ $OUTPUTS_ONLY -eq 0 ] && [ $PYTHON_ONLY -eq 0 ]; then
# Three 100 kbp contigs with islands every ~20 kb and runs of N every ~40 kb, so that unknown
# bases, contig starts and contexts broken by N are all exercised.
"$GEN" --length 100000 --contigs 3 --seed 11 --island-spacing 20000 --gap-spacing 40000 \
    --gap-max 2000 -o "$DATA/check-synthetic.fa"
check synthetic "$DATA/check-synthetic.fa"
LAMBDA=/usr/share/doc/bowtie2/examples/reference/lambda_virus.fa.gz
[ -r "$LAMBDA" ] && check lambda "$LAMBDA"
fi

# --- timing ----------------------------------------------------------------------------------
# run_timed OUT_PREFIX CMD...: writes "wall_seconds peak_rss_bytes cpu_seconds" to
# OUT_PREFIX.result. Wall time comes from the shell clock (/usr/bin/time -v prints only
# centiseconds), peak RSS and user+system time from /usr/bin/time -v.
run_timed() {
    local prefix=$1; shift
    local t0 t1
    t0=$(date +%s%N)
    if ! /usr/bin/time -v -o "$prefix.time" "$@" >/dev/null 2>"$prefix.err"; then
        log "command failed: $*"
        cat "$prefix.err" >&2
        return 1
    fi
    t1=$(date +%s%N)
    awk -v ns=$((t1 - t0)) -F': ' '
        /Maximum resident set size/ { rss = $2 }
        /User time/ { user = $2 } /System time/ { sys = $2 }
        END { printf "%.6f %.0f %.2f\n", ns / 1e9, rss * 1024, user + sys }' "$prefix.time" >"$prefix.result"
}

# Fixed cost of a run (process start, shared libraries, profile): tidemark on a one-base input,
# timed next to every tidemark run so that it sees the same load; the fastest run counts.
printf '>one\nA\n' >"$DATA/one-base.fa"
STARTUP=""
time_startup() {
    run_timed "$DATA/run.one" "$TM" scan -q -t 1 -p cpg-island-2state "$DATA/one-base.fa" -o "$DATA/run.one.bed" || exit 1
    local wall rss cpu
    read -r wall rss cpu <"$DATA/run.one.result"
    if [ -z "$STARTUP" ] || awk "BEGIN{exit !($wall < $STARTUP)}"; then STARTUP=$wall; fi
}

declare -a RAW=()
FAILED=0
bench_input() {  # label fasta bases(or empty: from the baseline's report)
    local label=$1 fasta=$2 bases=${3:-} reps=$REPEATS
    local best_tm="" best_bl="" rss_tm=0 rss_bl=0 cpu_tm="" cpu_bl="" largest=0
    if [ -n "$bases" ] && [ "$bases" -lt 50000000 ] && [ "$reps" -lt 5 ]; then reps=5; fi
    log "timing $label ($reps runs each)"
    for ((r = 1; r <= reps; r++)); do
        time_startup
        run_timed "$DATA/run.tm" "$TM" scan -q -t 1 -p cpg-island-2state "$fasta" -o "$DATA/run.tm.bed" || exit 1
        read -r wall rss cpu <"$DATA/run.tm.result"
        if [ -z "$best_tm" ] || awk "BEGIN{exit !($wall < $best_tm)}"; then best_tm=$wall; cpu_tm=$cpu; fi
        if [ "$rss" -gt "$rss_tm" ]; then rss_tm=$rss; fi
        run_timed "$DATA/run.bl" "$BL" --profile "$PROFILE_JSON" "$fasta" -o "$DATA/run.bl.bed" || exit 1
        read -r wall rss cpu <"$DATA/run.bl.result"
        if [ -z "$best_bl" ] || awk "BEGIN{exit !($wall < $best_bl)}"; then best_bl=$wall; cpu_bl=$cpu; fi
        if [ "$rss" -gt "$rss_bl" ]; then rss_bl=$rss; fi
    done
    # The baseline reports every contig's length on stderr: total and largest.
    local total
    read -r total largest < <(awk -F'\t' '/^baseline: / { n = $2 + 0; t += n; if (n > m) m = n }
                                          END { printf "%d %d\n", t, m }' "$DATA/run.bl.err")
    [ -n "$bases" ] || bases=$total
    # Calls without a CpG are tidemark's to drop (README, "Calls"); the baseline keeps them.
    local same
    same=$(/usr/bin/python3 "$ROOT/scripts/bench/same_calls.py" "$DATA/run.tm.bed" "$DATA/run.bl.bed" "$fasta")
    # Formatted at the end, once the start-up time has seen every run.
    RAW+=("$label|$bases|$largest|$best_tm|$best_bl|$rss_tm|$rss_bl|$cpu_tm|$cpu_bl|$same")
    # Targets of the benchmark issue, checked on every input.
    awk -v label="$label" -v tt="$best_tm" -v tb="$best_bl" -v rt="$rss_tm" -v rb="$rss_bl" -v L="$largest" 'BEGIN {
        ok = 1
        if (tb / tt < 1.5) { printf "bench: TARGET MISSED on %s: speed-up %.2fx < 1.5x\n", label, tb / tt; ok = 0 }
        if (rt > 0.3 * L + 64e6) { printf "bench: TARGET MISSED on %s: tidemark peak RSS %.0f B > 0.3 B/base x %d + 64 MB\n", label, rt, L; ok = 0 }
        if (rb < 8 * L) { printf "bench: NOTE on %s: baseline used %.1f B/base, less than the expected 8\n", label, rb / L }
        exit !ok }' >&2 || FAILED=1
    [ "$same" = yes ] || { log "calls differ between tidemark and the baseline on $label"; FAILED=1; }
}

if [ $THREADS_ONLY -eq 1 ] || [ $SHAPES_ONLY -eq 1 ] || [ $OUTPUTS_ONLY -eq 1 ] || [ $PYTHON_ONLY -eq 1 ]; then SIZES_MBP=(); SKIP_REAL=1; else SKIP_REAL=0; fi
for mbp in "${SIZES_MBP[@]}"; do
    fasta=$DATA/synthetic-${mbp}M.fa
    if [ ! -s "$fasta" ]; then
        log "generating $fasta"
        "$GEN" --length $((mbp * 1000000)) --seed "$mbp" -o "$fasta.tmp" && mv "$fasta.tmp" "$fasta"
    fi
    bench_input "synthetic ${mbp} Mbp" "$fasta" $((mbp * 1000000))
done
if [ $REAL -eq 1 ] && [ $SKIP_REAL -eq 0 ]; then
    if [ -r "$CHRX" ]; then
        bench_input "human chrX (GRCh37, gz)" "$CHRX"
    else
        log "skipping human chrX: $CHRX missing (scripts/install-deps.sh installs smalt-examples)"
    fi
fi


# --- threads: speed-up with 2 threads over 1, same outputs -------------------------------------
declare -a TROWS=()
bench_threads() {  # label fasta bases
    local label=$1 fasta=$2 bases=$3 best1="" best2="" cpu1="" cpu2="" rss1=0 rss2=0
    log "timing $label with 1 and 2 threads ($REPEATS runs each)"
    for ((r = 1; r <= REPEATS; r++)); do
        for t in 1 2; do
            run_timed "$DATA/run.t$t" "$TM" scan -q -t $t -p cpg-island-2state "$fasta" -o "$DATA/run.t$t.bed" \
                --summary "$DATA/run.t$t.json" || exit 1
            read -r wall rss cpu <"$DATA/run.t$t.result"
            if [ $t = 1 ]; then
                if [ -z "$best1" ] || awk "BEGIN{exit !($wall < $best1)}"; then best1=$wall; cpu1=$cpu; fi
                [ "$rss" -gt "$rss1" ] && rss1=$rss
            else
                if [ -z "$best2" ] || awk "BEGIN{exit !($wall < $best2)}"; then best2=$wall; cpu2=$cpu; fi
                [ "$rss" -gt "$rss2" ] && rss2=$rss
            fi
        done
    done
    local same=yes
    # The recorded command lines name different output files; everything else must be equal.
    local f
    for f in bed json; do
        cmp -s <(grep -v 'command' "$DATA/run.t1.$f") <(grep -v 'command' "$DATA/run.t2.$f") || same=NO
    done
    [ "$same" = yes ] || { log "outputs differ between 1 and 2 threads on $label"; FAILED=1; }
    TROWS+=("$(awk -v label="$label" -v n="$bases" -v t1="$best1" -v t2="$best2" -v c1="$cpu1" -v c2="$cpu2" \
                  -v r1="$rss1" -v r2="$rss2" -v same="$same" 'BEGIN {
        printf "| %s | %.0f | %.2f | %.1f | %.2f | %.1f | %.0f | %.0f | %.2f | %.2f | **%.2fx** | %s |",
            label, n / 1e6, t1, n / 1e6 / t1, t2, n / 1e6 / t2, r1 / 1048576, r2 / 1048576, c1, c2, t1 / t2, same }')")
    awk -v label="$label" -v t1="$best1" -v t2="$best2" -v want="$4" 'BEGIN {
        if (t1 / t2 < want) { printf "bench: TARGET MISSED on %s: 2-thread speed-up %.2fx < %.1fx\n", label, t1 / t2, want; exit 1 } }' >&2 || FAILED=1
}
if [ $SHAPES_ONLY -eq 0 ] && [ $OUTPUTS_ONLY -eq 0 ] && [ $PYTHON_ONLY -eq 0 ]; then
    MANY=$DATA/synthetic-100x1M.fa
    if [ ! -s "$MANY" ]; then
        log "generating $MANY"
        "$GEN" --length 1000000 --contigs 100 --seed 100 -o "$MANY.tmp" && mv "$MANY.tmp" "$MANY"
    fi
    ONE=$DATA/synthetic-100M.fa
    if [ ! -s "$ONE" ]; then
        log "generating $ONE"
        "$GEN" --length 100000000 --seed 101 -o "$ONE.tmp" && mv "$ONE.tmp" "$ONE"
    fi
    bench_threads "100 contigs x 1 Mbp" "$MANY" 100000000 1.8
    bench_threads "one contig, 100 Mbp" "$ONE" 100000000 1.5
fi

# --- input shapes: fragmented draft, mid-size contigs, chrX gzip and plain ------------------
declare -a SROWS=() SNOTES=()
# best_of LABEL N CMD...: runs CMD N times; sets BEST (fastest wall), BEST_CPU, PEAK (largest RSS).
best_of() {
    local label=$1 n=$2 r wall rss cpu; shift 2
    BEST="" BEST_CPU="" PEAK=0
    for ((r = 1; r <= n; r++)); do
        run_timed "$DATA/run.shape" "$@" || exit 1
        read -r wall rss cpu <"$DATA/run.shape.result"
        if [ -z "$BEST" ] || awk "BEGIN{exit !($wall < $BEST)}"; then BEST=$wall; BEST_CPU=$cpu; fi
        if [ "$rss" -gt "$PEAK" ]; then PEAK=$rss; fi
    done
}
# shape LABEL FASTA BASES CONTIGS: 1 and 2 threads alternating (and --compare's build, 1 thread).
shape() {
    local label=$1 fasta=$2 bases=$3 contigs=$4 t1="" t2="" old="" r
    log "timing $label with 1 and 2 threads ($REPEATS runs each)"
    for ((r = 1; r <= REPEATS; r++)); do
        best_of "$label" 1 "$TM" scan -q -t 1 -p cpg-island "$fasta" -o "$DATA/shape.t1.bed"
        if [ -z "$t1" ] || awk "BEGIN{exit !($BEST < $t1)}"; then t1=$BEST; fi
        best_of "$label" 1 "$TM" scan -q -t 2 -p cpg-island "$fasta" -o "$DATA/shape.t2.bed"
        if [ -z "$t2" ] || awk "BEGIN{exit !($BEST < $t2)}"; then t2=$BEST; fi
        if [ -n "$COMPARE" ]; then
            best_of "$label" 1 "$COMPARE" scan -q -t 1 -p cpg-island "$fasta" -o "$DATA/shape.old.bed"
            if [ -z "$old" ] || awk "BEGIN{exit !($BEST < $old)}"; then old=$BEST; fi
        fi
    done
    cmp -s <(grep -v '^#' "$DATA/shape.t1.bed") <(grep -v '^#' "$DATA/shape.t2.bed") ||
        { log "calls differ between 1 and 2 threads on $label"; FAILED=1; }
    SHAPE_T1=$t1 SHAPE_T2=$t2
    SROWS+=("$(awk -v label="$label" -v n="$bases" -v k="$contigs" -v t1="$t1" -v t2="$t2" -v old="$old" 'BEGIN {
        printf "| %s | %d | %.0f | %.2f | %.1f | %.2f | %.1f | **%.2fx** | %s |", label, k, n / 1e6, t1, n / 1e6 / t1,
            t2, n / 1e6 / t2, t1 / t2, (old == "" ? "-" : sprintf("%.2fx", old / t1)) }')")
}
# target OK_EXPRESSION TEXT: records a target line; a missed target fails the benchmark.
target() {
    if awk "BEGIN{exit !($1)}"; then SNOTES+=("- met: $2"); else SNOTES+=("- **MISSED**: $2"); log "TARGET MISSED: $2"; FAILED=1; fi
}
if [ $THREADS_ONLY -eq 0 ] && [ $OUTPUTS_ONLY -eq 0 ] && [ $PYTHON_ONLY -eq 0 ]; then
    DRAFT=$DATA/draft-300000x700.fa MID=$DATA/mid-105x2M.fa
    [ -s "$DRAFT" ] || "$TM" simulate -q -p cpg-island --seed 5 --contigs 300000 --length 700 -o "$DRAFT"
    [ -s "$MID" ] || "$TM" simulate -q -p cpg-island --seed 5 --contigs 105 --length 2000000 -o "$MID"
    shape "draft, 300,000 x 700 bp" "$DRAFT" 210000000 300000
    d1=$SHAPE_T1 d2=$SHAPE_T2
    shape "105 x 2 Mbp" "$MID" 210000000 105
    m1=$SHAPE_T1 m2=$SHAPE_T2
    target "$m1 / $d1 >= 0.8" "draft 1-thread Mbp/s $(awk "BEGIN{printf \"%.2f\", $m1 / $d1}")x that of 2-Mbp contigs (>= 0.8x)"
    target "$d1 / $d2 >= 1.8" "draft 2 threads $(awk "BEGIN{printf \"%.2f\", $d1 / $d2}")x over 1 (>= 1.8x)"
    target "$m1 / $m2 >= 1.8" "2-Mbp contigs 2 threads $(awk "BEGIN{printf \"%.2f\", $m1 / $m2}")x over 1 (>= 1.8x)"
    log "timing the draft with --summary and bedGraph, and with bigWig tracks (1 thread)"
    best_of draft "$REPEATS" "$TM" scan -q -t 1 -p cpg-island "$DRAFT" -o "$DATA/shape.bed" \
        --summary "$DATA/shape.json" --posteriors "$DATA/shape.bg"
    bg=$BEST bg_rss=$PEAK
    best_of draft "$REPEATS" "$TM" scan -q -t 1 -p cpg-island "$DRAFT" -o "$DATA/shape.bed" \
        --posteriors "$DATA/shape.bw" --track-format bigwig
    bw=$BEST
    target "$bg_rss <= 64 * 1048576 + 100 * 300000" "draft peak RSS with --summary and bedGraph $(awk "BEGIN{printf \"%.1f\", $bg_rss / 1048576}") MiB (<= 64 MiB + 100 B x 300,000 contigs = 92.6 MiB)"
    target "$bw / $bg <= 2" "draft with bigWig tracks $(awk "BEGIN{printf \"%.2f\", $bw / $bg}")x the time with bedGraph and --summary ($bw s vs $bg s; <= 2x)"
    # Millions of short records (short-read assemblies): 3 M records of 100-300 bp, once, with
    # --summary and bedGraph tracks; memory grows only by the duplicate-name check per record.
    MANY=$DATA/many-3M-100to300.fa
    if [ ! -s "$MANY" ]; then
        many_bases=$(python3 "$ROOT/scripts/bench/many-records.py" 3000000 100 300 23 --lengths)
        "$TM" simulate -q -p cpg-island --seed 23 --lengths "$many_bases" --line-width 0 -o "$DATA/many.src.fa"
        python3 "$ROOT/scripts/bench/many-records.py" 3000000 100 300 23 "$DATA/many.src.fa" "$MANY"
        rm -f "$DATA/many.src.fa"
    fi
    log "timing 3 M records of 100-300 bp with --summary and bedGraph (1 thread, once)"
    best_of many 1 "$TM" scan -q -t 1 -p cpg-island "$MANY" -o "$DATA/many.bed" \
        --summary "$DATA/many.json" --posteriors "$DATA/many.bg"
    many_bases=$(python3 "$ROOT/scripts/bench/many-records.py" 3000000 100 300 23 --lengths)
    SNOTES+=("- 3,000,000 records of 100-300 bp ($(awk "BEGIN{printf \"%.0f\", $many_bases / 1e6}") Mbp) with --summary and bedGraph, 1 thread: $BEST s, peak RSS $(awk "BEGIN{printf \"%.1f\", $PEAK / 1048576}") MiB ($(awk "BEGIN{printf \"%.1f\", $PEAK / 3e6}") B a record), summary $(stat -c %s "$DATA/many.json") B")
    target "$PEAK <= 64 * 1048576 + 100 * 3000000" "3 M records peak RSS $(awk "BEGIN{printf \"%.1f\", $PEAK / 1048576}") MiB (<= 64 MiB + 100 B x 3,000,000 records = 350.1 MiB)"
    if [ -r "$CHRX" ]; then
        PLAIN=$DATA/hs37chrXtrunc.fa
        [ -s "$PLAIN" ] || gzip -dc "$CHRX" >"$PLAIN"
        chrx_bases=$(grep -v '>' "$PLAIN" | tr -d '\n' | wc -c)
        shape "human chrX 1-70 Mb, .fa.gz" "$CHRX" "$chrx_bases" 1
        g1=$SHAPE_T1 g2=$SHAPE_T2
        shape "human chrX 1-70 Mb, plain" "$PLAIN" "$chrx_bases" 1
        p2=$SHAPE_T2
        target "$g1 / $g2 >= 1.8" "chrX .fa.gz 2 threads $(awk "BEGIN{printf \"%.2f\", $g1 / $g2}")x over 1 (>= 1.8x)"
        target "$g2 / $p2 <= 1.15" "chrX .fa.gz $(awk "BEGIN{printf \"%.2f\", $g2 / $p2}")x the time of plain text, 2 threads (<= 1.15x)"
        PROJECTED=$(awk -v t="$g2" -v n="$chrx_bases" 'BEGIN{printf "%.0f", t / n * 3.1e9}')
        target "$PROJECTED < 40" "a 3.1-Gbp human assembly as .fa.gz with 2 threads, at chrX's .fa.gz speed: ${PROJECTED} s (< 40 s)"
    fi
fi

# --- outputs: what a browser-ready run costs over BED alone (chrX, 2 threads) ---------------
declare -a OROWS=() ONOTES=()
if [ $THREADS_ONLY -eq 0 ] && [ $SHAPES_ONLY -eq 0 ] && [ $PYTHON_ONLY -eq 0 ] && [ -r "$CHRX" ]; then
    O=$DATA/out
    OUTPUT_NAMES=("BED only" "--bgzip BED" "--posteriors bedGraph" "--posteriors bedGraph, --bgzip"
        "--posteriors --track-format bigwig" "--summary --report" "--html" "--gff3"
        "all (bgzip BED, bigWig, summary, report, HTML, GFF3, chrom sizes)")
    output_args() {  # row number -> the options of that row
        case $1 in
            0) echo "-o $O.bed" ;;
            1) echo "-o $O.bed.gz --bgzip" ;;
            2) echo "-o $O.bed --posteriors $O.bg" ;;
            3) echo "-o $O.bed.gz --posteriors $O.bgz --bgzip" ;;
            4) echo "-o $O.bed --posteriors $O.bw --track-format bigwig" ;;
            5) echo "-o $O.bed --summary $O.json --report $O.report.json" ;;
            6) echo "-o $O.bed --html $O.html" ;;
            7) echo "-o $O.bed --gff3 $O.gff3" ;;
            8) echo "-o $O.all.bed.gz --bgzip --posteriors $O.all --track-format bigwig --summary $O.json --report $O.report.json --html $O.html --gff3 $O.gff3 --chrom-sizes $O.sizes" ;;
        esac
    }
    declare -a OBEST=()
    log "timing chrX with each output, 2 threads ($REPEATS rounds, rows alternating)"
    for ((r = 1; r <= REPEATS; r++)); do
        for i in "${!OUTPUT_NAMES[@]}"; do
            # shellcheck disable=SC2046  # the options are words without spaces
            best_of outputs 1 "$TM" scan -q -t 2 -p cpg-island "$CHRX" $(output_args "$i")
            if [ -z "${OBEST[$i]:-}" ] || awk "BEGIN{exit !($BEST < ${OBEST[$i]})}"; then OBEST[$i]=$BEST; fi
        done
    done
    for i in "${!OUTPUT_NAMES[@]}"; do
        OROWS+=("$(awk -v label="${OUTPUT_NAMES[$i]}" -v t="${OBEST[$i]}" -v t0="${OBEST[0]}" 'BEGIN {
            printf "| %s | %.2f | **%.2fx** |", label, t, t / t0 }')")
    done
    ratio() { awk -v t="${OBEST[$1]}" -v t0="${OBEST[0]}" 'BEGIN{printf "%.2f", t / t0}'; }
    ONOTES=()
    otarget() {  # OK_EXPRESSION TEXT
        if awk "BEGIN{exit !($1)}"; then ONOTES+=("- met: $2"); else ONOTES+=("- **MISSED**: $2"); log "TARGET MISSED: $2"; FAILED=1; fi
    }
    otarget "$(ratio 8) <= 1.3" "all outputs $(ratio 8)x BED only (<= 1.3x)"
    otarget "$(ratio 4) <= 1.15" "bigWig $(ratio 4)x BED only (<= 1.15x)"
    otarget "$(ratio 3) <= 1.2" "bgzip bedGraph $(ratio 3)x BED only (<= 1.2x)"
fi

# --- Python module vs command line: chrX from the file, one thread ----------------------------
# tidemark.decode_file with the posteriors as float64 (the default), float32 and none (calls and
# log-likelihood only), each run alternating with tidemark scan; the target is on float64.
declare -a PROWS=()
if [ $THREADS_ONLY -eq 0 ] && [ $SHAPES_ONLY -eq 0 ] && [ $OUTPUTS_ONLY -eq 0 ] && [ $PYTHON_MODULE -eq 1 ] && [ -r "$CHRX" ]; then
    chrx_bases=${chrx_bases:-$(gzip -dc "$CHRX" | grep -v '>' | tr -d '\n' | wc -c)}
    for dtype in float64 float32 none; do
        log "timing tidemark.decode_file (posteriors $dtype) against tidemark scan on chrX, 1 thread ($REPEATS runs each)"
        cli_best="" py_best="" cli_rss=0 py_rss=0 cli_cpu="" py_cpu="" py_thread=""
        for ((r = 1; r <= REPEATS; r++)); do
            best_of chrx 1 "$TM" scan -q -t 1 -p cpg-island "$CHRX" -o "$DATA/python.cli.bed"
            if [ -z "$cli_best" ] || awk "BEGIN{exit !($BEST < $cli_best)}"; then cli_best=$BEST; cli_cpu=$BEST_CPU; fi
            [ "$PEAK" -gt "$cli_rss" ] && cli_rss=$PEAK
            best_of chrx 1 env PYTHONPATH="$BUILD/python" /usr/bin/python3 "$ROOT/scripts/bench/python_decode.py" \
                cpg-island "$CHRX" "$dtype"
            if [ -z "$py_best" ] || awk "BEGIN{exit !($BEST < $py_best)}"; then
                py_best=$BEST py_cpu=$BEST_CPU
                py_thread=$(sed -n 's/^decoding thread CPU s: //p' "$DATA/run.shape.err")
            fi
            [ "$PEAK" -gt "$py_rss" ] && py_rss=$PEAK
        done
        cli_calls=$(grep -vc '^#' "$DATA/python.cli.bed" || true)
        py_calls=$(PYTHONPATH="$BUILD/python" /usr/bin/python3 "$ROOT/scripts/bench/python_decode.py" cpg-island "$CHRX" none 2>/dev/null | cut -d' ' -f1)
        [ "$cli_calls" = "$py_calls" ] || { log "Python made $py_calls calls, the command line $cli_calls"; FAILED=1; }
        PROWS+=("$(awk -v n="$chrx_bases" -v c="$cli_best" -v p="$py_best" -v rc="$cli_rss" -v rp="$py_rss" \
                       -v cc="$cli_cpu" -v pc="$py_cpu" -v pt="$py_thread" -v dt="$dtype" 'BEGIN {
            printf "| human chrX 1-70 Mb, .fa.gz | %s | %.0f | %.2f | %.2f | %.0f | %.2f | %.2f | %.2f | %.0f | **%.2fx** | %.2fx | %.2fx |",
                dt, n / 1e6, c, cc, rc / 1048576, p, pc, pt, rp / 1048576, c / p, (pc > 0 ? cc / pc : 0),
                (pt > 0 ? cc / pt : 0) }')")
        if [ "$dtype" = float64 ]; then
            target "$cli_best / $py_best >= 0.9" "Python decode of chrX from the file (float64 posteriors) at $(awk "BEGIN{printf \"%.2f\", $cli_best / $py_best}")x the command line's speed, 1 thread (>= 0.9x)"
        fi
    done
fi

# --- report ------------------------------------------------------------------------------
declare -a ROWS=()
for raw in "${RAW[@]}"; do
    IFS='|' read -r label n L tt tb rt rb ct cb same <<<"$raw"
    ROWS+=("$(awk -v label="$label" -v n="$n" -v L="$L" -v tt="$tt" -v tb="$tb" -v rt="$rt" -v rb="$rb" \
                  -v ct="$ct" -v cb="$cb" -v same="$same" -v t0="$STARTUP" 'BEGIN {
        printf "| %s | %.1f | %.2f | %.1f | %.1f | %.1f | %.0f | %.2f | %.2f | %.1f | %.1f | %.0f | %.1f | **%.2fx** | %s | %s |",
            label, n / 1e6, tt, n / 1e6 / tt, tt / n * 1e9, (tt - t0) / n * 1e9, rt / 1048576, rt / L,
            tb, n / 1e6 / tb, tb / n * 1e9, rb / 1048576, rb / L, tb / tt,
            (ct > 0 ? sprintf("%.2fx", cb / ct) : "-"), same }')")
done
# Per-base time over the synthetic sizes, end to end and net of the start-up.
flat=""
[ ${#RAW[@]} -gt 0 ] && flat=$(printf '%s\n' "${RAW[@]}" | awk -F'|' -v t0="$STARTUP" '$1 ~ /^synthetic/ {
            r = $4 / $2 * 1e9; q = ($4 - t0) / $2 * 1e9
            if (!k++) { lo = hi = r; nlo = nhi = q }
            if (r < lo) lo = r; if (r > hi) hi = r; if (q < nlo) nlo = q; if (q > nhi) nhi = q }
        END { printf "%.1f to %.1f ns/base end to end (max/min %.2f); %.1f to %.1f ns/base (max/min %.2f) net of the %.1f ms start-up",
              lo, hi, hi / lo, nlo, nhi, nhi / nlo, t0 * 1e3 }')
{
if [ $THREADS_ONLY -eq 0 ] && [ $SHAPES_ONLY -eq 0 ] && [ $OUTPUTS_ONLY -eq 0 ] && [ $PYTHON_ONLY -eq 0 ]; then
    echo "### tidemark scan -p cpg-island-2state vs. simple baseline (one thread)"
    echo
    echo "$(date -u '+%Y-%m-%d %H:%M UTC'); $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ *//'),"\
         "$(nproc) cores shared with other work; $(c++ --version | head -1);"\
         "tidemark $("$TM" --version | awk '{print $2}') at $(git -C "$ROOT" describe --always --dirty 2>/dev/null || echo '?')."
    echo "Fastest of $REPEATS runs (at least 5 below 50 Mbp), tidemark and baseline alternating;"\
         "wall time end to end (read FASTA, decode, call, write BED)."
    echo "'net ns/base' subtracts tidemark's start-up time (a one-base input timed beside every run, fastest)."\
         "Peak RSS from GNU time; B/base = peak RSS / longest contig. 'CPU ratio' = baseline"\
         "over tidemark user+system time (10 ms resolution), less sensitive to other load."
    echo
    echo "| input | Mbp | tidemark s | Mbp/s | ns/base | net ns/base | RSS MiB | B/base | baseline s | Mbp/s | ns/base | RSS MiB | B/base | speed-up | CPU ratio | same calls |"
    echo "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|:-:|"
    printf '%s\n' "${ROWS[@]}"
    echo
    echo "tidemark time per base over the synthetic sizes: $flat."
    echo "Agreement with the baseline before timing:"
    sed 's/^/- /' "$DATA/agreement.txt"
    echo
    echo
fi
if [ $SHAPES_ONLY -eq 0 ] && [ $OUTPUTS_ONLY -eq 0 ] && [ $PYTHON_ONLY -eq 0 ]; then
    echo "### tidemark scan -p cpg-island-2state with 1 and 2 threads"
    echo
    echo "$(date -u '+%Y-%m-%d %H:%M UTC'); $(nproc) cores shared with other work. Fastest of $REPEATS runs each,"\
         "1 and 2 threads alternating; BED and summary compared byte for byte ('same')."
    echo
    echo "| input | Mbp | 1 thread s | Mbp/s | 2 threads s | Mbp/s | RSS MiB (1) | RSS MiB (2) | CPU s (1) | CPU s (2) | speed-up | same |"
    echo "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|:-:|"
    printf '%s\n' "${TROWS[@]}"
    echo
fi
if [ $THREADS_ONLY -eq 0 ] && [ $OUTPUTS_ONLY -eq 0 ] && [ $PYTHON_ONLY -eq 0 ]; then
    echo "### tidemark scan -p cpg-island on input shapes"
    echo
    echo "$(date -u '+%Y-%m-%d %H:%M UTC'); $(nproc) cores; fastest of $REPEATS runs, 1 and 2 threads alternating,"\
         "BED to a file; the draft and the 2-Mbp contigs simulated with -p cpg-island --seed 5."\
         "'vs old' = the --compare build's 1-thread time over this build's."
    echo
    echo "| input | contigs | Mbp | 1 thread s | Mbp/s | 2 threads s | Mbp/s | speed-up | vs old |"
    echo "|---|---:|---:|---:|---:|---:|---:|---:|---:|"
    printf '%s\n' "${SROWS[@]}"
    echo
    printf '%s\n' "${SNOTES[@]}"
    echo
fi
if [ ${#OROWS[@]} -gt 0 ]; then
    echo "### tidemark scan -p cpg-island -t 2 on human chrX 1-70 Mb (.fa.gz) with each output"
    echo
    echo "$(date -u '+%Y-%m-%d %H:%M UTC'); $(nproc) cores shared with other work. Fastest of $REPEATS rounds,"\
         "all rows alternating within a round; '× BED' = the row's time over BED only."
    echo
    echo "| outputs | seconds | × BED |"
    echo "|---|---:|---:|"
    printf '%s\n' "${OROWS[@]}"
    echo
    printf '%s\n' "${ONOTES[@]}"
    echo
fi
if [ ${#PROWS[@]} -gt 0 ]; then
    echo "### tidemark.decode_file (Python) vs tidemark scan, one thread"
    echo
    echo "$(date -u '+%Y-%m-%d %H:%M UTC'); fastest of $REPEATS runs each, alternating; -p cpg-island."\
         "Command line: BED calls to a file. Python (scripts/bench/python_decode.py): the record's"\
         "P(cpg_island) per base as a numpy array (float64 8 B/base, float32 4 B/base, in the peak RSS;"\
         "none: calls and log-likelihood only) and its calls."\
         "Wall time and peak RSS of the whole process (interpreter start and numpy import included)."\
         "'decoding thread' = CPU time of the thread that decoded (the module commits the array's pages"\
         "on a second thread meanwhile), what the wall time comes to with a core free for that thread."
    echo
    echo "| input | posteriors | Mbp | CLI s | CLI CPU s | CLI RSS MiB | Python s | Python CPU s | decoding thread CPU s | Python RSS MiB | Python speed / CLI | CPU ratio | CLI CPU / decoding thread |"
    echo "|---|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|"
    printf '%s\n' "${PROWS[@]}"
    echo
    printf '%s\n' "${SNOTES[@]}" | grep -F 'Python decode' || true
    echo
fi
    echo "Command: scripts/bench.sh$([ $QUICK -eq 1 ] && echo ' --quick') --repeats $REPEATS$([ $REAL -eq 1 ] || echo ' --no-real')$([ $THREADS_ONLY -eq 1 ] && echo ' --threads-only')$([ $SHAPES_ONLY -eq 1 ] && echo ' --shapes-only')$([ $OUTPUTS_ONLY -eq 1 ] && echo ' --outputs-only')$([ $PYTHON_ONLY -eq 1 ] && echo ' --python-only')$([ -n "$COMPARE" ] && echo " --compare $COMPARE")"
} | tee "$RESULTS"
log "table written to $RESULTS"
[ $FAILED -eq 0 ] || { log "some targets were missed (see above)"; exit 1; }
