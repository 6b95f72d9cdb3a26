#!/usr/bin/env bash
# Installs the Debian 12 packages tidemark needs; idempotent.
#   install-deps.sh          everything: build, run, test, benchmark (scripts/test.sh, CI)
#   install-deps.sh --tool   only what building and running the tool needs (scripts/demo.sh)
#   install-deps.sh --python the tool's packages and those of the Python module (import tidemark;
#                            scripts/install-python.sh)
set -euo pipefail

# Building and running the tool (see README "Dependencies").
tool_packages=(
  build-essential cmake pkg-config
  libhts-dev zlib1g-dev libeigen3-dev libboost-iostreams-dev libcli11-dev
  nlohmann-json3-dev libfmt-dev libbigwig-dev libcurl4-gnutls-dev libisal-dev libzstd-dev libdeflate-dev
)
# The Python module (-DTIDEMARK_BUILD_PYTHON=ON): pybind11 and Python's headers to build it, numpy to
# use it; pandas for Decoding.calls_frame() (optional at run time).
python_packages=(
  python3 python3-dev pybind11-dev python3-pybind11 python3-numpy python3-pandas
)
# Tests, sanitizer and fuzzing builds, benchmarks and the scale-out workflow.
test_packages=(
  git ca-certificates catch2
  # the formatting check of scripts/test.sh
  clang-format
  # sanitizer and fuzzing builds
  clang libclang-rt-14-dev
  # test oracles and open datasets
  python3 python3-numpy python3-scipy python3-pomegranate python3-pybigwig python3-matplotlib
  tabix bedtools genometools gzip xz-utils bzip2 zstd
  bowtie2-examples smalt-examples bowtie-examples cct-examples sibelia-examples ragout-examples
  # four Klebsiella genomes of the islands benchmark panel (scripts/island-panel.py)
  kleborate-examples
  # the HTML report (scan --html): rendered by a real browser, validated by two HTML parsers
  chromium python3-pil python3-html5lib tidy
  # the browser-client test (tests/oracle/test_browser_client.py): node runs igv.js and
  # playwright-core, installed by `npm ci` from tests/browser/package-lock.json (Debian 12:
  # nodejs 18, npm 9)
  nodejs npm
  # the install test renders the man page (man -l, groff)
  man-db groff-base
  # the Python module's tests (tests/python, CTest label python)
  python3-pytest
  # benchmarks (scripts/bench.sh, scripts/bench-fit.sh: wall time and peak RSS)
  time
  # scale-out workflow (scripts/workflow/Snakefile) and its test (CTest label workflow)
  snakemake
)

case "${1:-}" in
  --tool) packages=("${tool_packages[@]}") ;;
  --python) packages=("${tool_packages[@]}" "${python_packages[@]}") ;;
  "") packages=("${tool_packages[@]}" "${python_packages[@]}" "${test_packages[@]}") ;;
  *) echo "usage: install-deps.sh [--tool | --python]" >&2; exit 2 ;;
esac

missing=()
for p in "${packages[@]}"; do
  # A nodejs package from outside Debian may carry npm itself (and conflict with Debian's).
  if [ "$p" = npm ] && command -v npm >/dev/null 2>&1; then continue; fi
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q 'install ok installed' || missing+=("$p")
done
if [ ${#missing[@]} -eq 0 ]; then
  echo "install-deps: all ${#packages[@]} packages present" >&2
  exit 0
fi
echo "install-deps: installing ${missing[*]}" >&2
SUDO=""
[ "$(id -u)" -eq 0 ] || SUDO="sudo"
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends "${missing[@]}"
