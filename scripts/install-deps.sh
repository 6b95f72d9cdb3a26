#!/usr/bin/env bash
# Installs every Debian 12 package tidemark needs to build, test and benchmark; idempotent.
set -euo pipefail

packages=(
  # build
  build-essential cmake pkg-config git ca-certificates
  # libraries (see README "Dependencies")
  libhts-dev zlib1g-dev libeigen3-dev libboost-iostreams-dev libcli11-dev
  nlohmann-json3-dev libfmt-dev catch2 libbigwig-dev libcurl4-gnutls-dev
  # sanitizer and fuzzing builds
  clang libclang-rt-14-dev
  # test oracles and open datasets
  python3 python3-numpy python3-scipy python3-pomegranate python3-pybigwig python3-matplotlib
  tabix bedtools genometools gzip xz-utils bzip2 zstd
  # the HTML report (scan --html): rendered by a real browser, validated by two HTML parsers
  chromium python3-pil python3-html5lib tidy
  bowtie2-examples smalt-examples bowtie-examples cct-examples sibelia-examples
  # benchmarks (scripts/bench.sh, scripts/bench-fit.sh: wall time and peak RSS)
  time
  # scale-out workflow (scripts/workflow/Snakefile) and its test (CTest label workflow)
  snakemake
)

missing=()
for p in "${packages[@]}"; do
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
