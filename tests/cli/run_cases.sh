#!/usr/bin/env bash
# Table-driven command-line cases: runs every row of every tests/cli/*.tsv in a scratch copy of
# tests/data and checks the exit code and a fragment of stdout or stderr.
# Usage: run_cases.sh TIDEMARK_BINARY TESTS_SOURCE_DIR
set -u
tm=$(readlink -f "$1")
src=$(readlink -f "$2")
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cp -r "$src/data/." "$work/"
cd "$work" || exit 1

pass=0
fail=0
for table in "$src"/cli/*.tsv; do
while IFS=$'\t' read -r name expect stream fragment command; do
  [ -z "$name" ] && continue
  case "$name" in \#*) continue ;; esac
  out=$(TM="$tm" bash -c "${command//\$TM/\"$tm\"}" 2>"$work/.stderr")
  code=$?
  err=$(cat "$work/.stderr")
  case "$stream" in
    stdout) text=$out ;;
    stderr) text=$err ;;
    *) text="" ;;
  esac
  if [ "$code" != "$expect" ]; then
    echo "FAIL $name: exit $code, expected $expect"; echo "  command: $command"; echo "  stderr: $err" | head -5
    fail=$((fail + 1))
  elif [ "$stream" != "-" ] && [[ "$text" != *"$fragment"* ]]; then
    echo "FAIL $name: $stream lacks '$fragment'"; echo "  command: $command"; echo "  $stream: ${text:0:400}"
    fail=$((fail + 1))
  else
    pass=$((pass + 1))
  fi
done < "$table"
done
echo "$pass passed, $fail failed"
[ "$fail" -eq 0 ]
