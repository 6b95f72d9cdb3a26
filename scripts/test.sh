#!/usr/bin/env bash
# Installs the dependencies, builds tidemark and runs the whole test suite (unit, oracle and
# command-line tests). Used by CI (.ci/run) and by developers; run from anywhere.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/install-deps.sh
build=${TIDEMARK_BUILD_DIR:-build}
cmake -S . -B "$build" -DCMAKE_BUILD_TYPE=Release -DTIDEMARK_WERROR=ON
cmake --build "$build" -j"$(nproc)"
ctest --test-dir "$build" --output-on-failure --no-tests=error -j"$(nproc)"
