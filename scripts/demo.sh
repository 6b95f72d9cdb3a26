#!/usr/bin/env bash
# Installs what building and running tidemark needs (not the test tools), builds the tool alone
# (no test suite) and scans the bundled demo assembly with the built-in default profile;
# results go to demo-output/. Prints how long each step took.
set -euo pipefail
cd "$(dirname "$0")/.."

step_start=0
steps=()
begin_step() {
  step_name=$1
  step_start=$(date +%s.%N)
  echo "== demo: $step_name" >&2
}
end_step() {
  local seconds
  seconds=$(awk -v a="$step_start" -v b="$(date +%s.%N)" 'BEGIN { printf "%.1f", b - a }')
  steps+=("$(printf '%-28s %7s s' "$step_name" "$seconds")")
}
total_start=$(date +%s.%N)

begin_step "install packages (--tool)"
bash scripts/install-deps.sh --tool
end_step

begin_step "configure (no tests)"
cmake -S . -B build -DCMAKE_BUILD_TYPE=Release -DTIDEMARK_BUILD_TESTS=OFF >/dev/null
end_step

begin_step "build the tool"
cmake --build build -j"$(nproc)"
end_step

begin_step "scan the demo assembly"
mkdir -p demo-output
./build/tidemark scan data/demo/demo.fa.gz -o demo-output/calls.bed \
  --posteriors demo-output/posterior --summary demo-output/summary.json --verbose
end_step

echo "demo: calls in demo-output/calls.bed, posteriors in demo-output/posterior.*.bedgraph," \
     "summary in demo-output/summary.json" >&2
cat demo-output/calls.bed
{
  echo "demo: time per step"
  for s in "${steps[@]}"; do echo "  $s"; done
  awk -v a="$total_start" -v b="$(date +%s.%N)" 'BEGIN { printf "  %-28s %7.1f s\n", "total", b - a }'
} >&2
