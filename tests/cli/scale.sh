#!/usr/bin/env bash
# A 250 Mbp synthetic chromosome with assembly gaps: decoding stays finite (no NaN or infinity
# in any output), the length is kept, and peak memory stays within 0.3 bytes per base + 64 MiB.
# Usage: scale.sh TIDEMARK_BINARY TESTS_SOURCE_DIR
. "$(dirname "$0")/harness.bash" "$1"
length=250000000
"$tm" simulate -p cpg-island --lengths "$length" --gaps 0.01 --gap-length 50000 --seed 250 \
  --line-width 0 -o big.fa -q
"$tm" scan big.fa -q -o calls.bed --posteriors p --posterior-digits 6 --bin 1000 --report report.json
check "scan of 250 Mbp succeeds" test -s report.json
check "no NaN or infinity in the outputs" sh -c '! grep -qiwE "nan|-?inf" calls.bed p.cpg_island.bedgraph report.json'
python3 - "$length" <<'PY' || fail=$((fail + 1))
import json, math, os, sys
n = int(sys.argv[1])
r = json.load(open("report.json"))
c = r["contigs"][0]
ok = c["length"] == n and math.isfinite(c["log_likelihood"]) and c["log_likelihood"] < 0
# Bounded memory (README "Performance"): 2 bits per base plus a constant.
limit = 0.3 * n + 64 * 2**20
rss = r["resources"]["peak_rss_bytes"]
print(f"length {c['length']}, log-likelihood {c['log_likelihood']:.6g}, peak RSS {rss / 2**20:.1f} MiB (limit {limit / 2**20:.1f})")
# Sanitizer builds (scripts/test.sh sets ASAN_OPTIONS) add shadow memory: skip the bound there.
sys.exit(0 if ok and (0 < rss <= limit or "ASAN_OPTIONS" in os.environ) else 1)
PY
[ $? -eq 0 ] && pass=$((pass + 1))
finish
