#!/usr/bin/env bash
# Builds the libFuzzer targets with clang (AddressSanitizer + UndefinedBehaviorSanitizer) and
# runs each for SECONDS seconds (default 30) starting from its seed corpus. New inputs go to a
# scratch folder, not into the repository; a crash leaves its input in build-fuzz/findings/.
# Usage: scripts/fuzz.sh [SECONDS] [TARGET...]   (targets: fasta region profile bed)
set -euo pipefail
cd "$(dirname "$0")/.."
seconds=${1:-30}
shift || true
targets=("$@")
[ ${#targets[@]} -gt 0 ] || targets=(fasta region profile bed)
build=${TIDEMARK_FUZZ_BUILD_DIR:-build-fuzz}
mkdir -p "$build"
cmake -S . -B "$build" -DCMAKE_BUILD_TYPE=RelWithDebInfo -DCMAKE_CXX_COMPILER=clang++ \
  -DTIDEMARK_FUZZ=ON -DTIDEMARK_BUILD_TESTS=ON > "$build/configure.log" 2>&1 || { cat "$build/configure.log"; exit 1; }
cmake --build "$build" -j"$(nproc)" --target $(printf 'fuzz_%s ' "${targets[@]}")
mkdir -p "$build/findings"
status=0
for t in "${targets[@]}"; do
  scratch="$build/corpus-$t"
  mkdir -p "$scratch"
  echo "fuzz: $t for ${seconds}s" >&2
  if ! "$build/tests/fuzz_$t" -max_total_time="$seconds" -max_len=65536 -timeout=10 \
       -artifact_prefix="$build/findings/$t-" -print_final_stats=1 "$scratch" "tests/fuzz/corpus/$t" \
       > "$build/fuzz-$t.log" 2>&1; then
    echo "fuzz: $t FAILED; see $build/fuzz-$t.log and $build/findings/" >&2
    tail -40 "$build/fuzz-$t.log" >&2
    status=1
  else
    grep -E '^stat::number_of_executed_units|^#[0-9]+.*DONE' "$build/fuzz-$t.log" | tail -2 >&2 || true
  fi
done
exit $status
