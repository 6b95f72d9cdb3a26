# The frame of the end-to-end scripts in tests/cli: sourced as
#   . "$(dirname "$0")/harness.bash" "$1"
# it sets tm (the binary, absolute), works in a temporary folder removed at exit, and counts
# checks: check NAME COMMAND... passes when COMMAND succeeds; finish prints the counts and fails
# when any check failed. (Not named *.sh: tests/CMakeLists.txt runs every tests/cli/*.sh as a
# test.)
set -u
tm=$(readlink -f "$1")
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cd "$work" || exit 1
pass=0
fail=0
check() {  # check NAME COMMAND...
  local name=$1
  shift
  if "$@"; then pass=$((pass + 1)); else echo "FAIL $name"; fail=$((fail + 1)); fi
}
finish() {
  echo "$pass passed, $fail failed"
  [ "$fail" -eq 0 ]
}
