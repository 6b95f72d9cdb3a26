#!/usr/bin/env bash
# Rebuilds data/profiles/cpg-island.json from human chrX (Debian smalt-examples) by labelled
# counting on X:1-35,000,000; see sources.json for the rules and citations.
# Usage: bash scripts/cpg-island/build.sh BUILD/tidemark
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
repo=$(cd "$here/../.." && pwd)
tm=$(readlink -f "$1")
chrx=/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz
[ -r "$chrx" ] || { echo "build.sh: install smalt-examples (scripts/install-deps.sh)" >&2; exit 1; }
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
mkdir "$work/bin"
ln -s "$tm" "$work/bin/tidemark"  # so that the recorded command reads 'tidemark fit ...'
cd "$work"
zcat "$chrx" > chrX.fa  # fit -r reads through a .fai index: plain FASTA
python3 "$here/make-labels.py" chrX.fa X 0 35000000 0.41,0.56 > labels.bed
python3 "$here/make-start.py" 3 > start.json
PATH="$work/bin:$PATH" tidemark fit chrX.fa -r X:1-35000000 -p start.json --labels labels.bed --default-region bg2 \
    -o counted.json -q
python3 "$here/finish.py" counted.json "$here/sources.json" > "$repo/data/profiles/cpg-island.json"
"$tm" profiles check "$repo/data/profiles/cpg-island.json"
