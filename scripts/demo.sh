#!/usr/bin/env bash
# Installs the dependencies, builds tidemark and scans the bundled demo assembly with the
# built-in default profile (cpg-island); results go to demo-output/.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/install-deps.sh
cmake -S . -B build -DCMAKE_BUILD_TYPE=Release
cmake --build build -j"$(nproc)"
mkdir -p demo-output
./build/tidemark scan data/demo/demo.fa.gz -o demo-output/calls.bed \
  --posteriors demo-output/posterior --summary demo-output/summary.json --verbose
echo "demo: calls in demo-output/calls.bed, posteriors in demo-output/posterior.*.bedgraph," \
     "summary in demo-output/summary.json" >&2
cat demo-output/calls.bed
