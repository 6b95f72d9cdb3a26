#!/usr/bin/env bash
# Installs the Python module (import tidemark) and the tidemark command line, library and headers
# on Debian 12 from Debian packages only: installs the packages (install-deps.sh --python),
# builds a Release tree with the module and installs it under PREFIX (default /usr/local, whose
# lib/python3.11/dist-packages Debian's python3 searches).
#   scripts/install-python.sh [PREFIX]
set -euo pipefail
cd "$(dirname "$0")/.."
prefix=${1:-/usr/local}
bash scripts/install-deps.sh --python
build=build-python
cmake -S . -B "$build" -DCMAKE_BUILD_TYPE=Release -DTIDEMARK_BUILD_PYTHON=ON -DTIDEMARK_BUILD_TESTS=OFF \
      -DCMAKE_INSTALL_PREFIX="$prefix" >/dev/null
cmake --build "$build" -j"$(nproc)"
SUDO=""
[ -w "$prefix" ] || [ "$(id -u)" -eq 0 ] || SUDO="sudo"
$SUDO cmake --install "$build"
echo "install-python: installed under $prefix; try: python3 -c 'import tidemark; print(tidemark.builtin_profiles())'" >&2
