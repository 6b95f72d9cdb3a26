#!/usr/bin/env bash
# Installs the dependencies, builds tidemark and runs the whole test suite (unit, oracle,
# command-line and fuzz-corpus tests); then the same suite again built with AddressSanitizer and
# UndefinedBehaviorSanitizer, the threaded tests built with ThreadSanitizer, and each libFuzzer
# target for a short fixed time.
# Used by CI (.ci/run). TIDEMARK_QUICK=1 runs only the first pass; TIDEMARK_FUZZ_SECONDS sets the
# fuzzing time per target (default 30).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/install-deps.sh
jobs=$(nproc)

echo "== test: formatting (clang-format with the repository's .clang-format)" >&2
git ls-files '*.cpp' '*.hpp' | xargs clang-format --dry-run -Werror

echo "== test: release build" >&2
cmake -S . -B build -DCMAKE_BUILD_TYPE=Release -DTIDEMARK_WERROR=ON -DTIDEMARK_BUILD_TESTS=ON \
      -DTIDEMARK_BUILD_PYTHON=ON
cmake --build build -j"$jobs"
ctest --test-dir build --output-on-failure --no-tests=error -j"$jobs"
[ "${TIDEMARK_QUICK:-0}" = 1 ] && exit 0

echo "== test: AddressSanitizer + UndefinedBehaviorSanitizer build" >&2
# The Python module is built with the sanitizers too; its tests run python3 with the ASan runtime
# preloaded and leak detection off (the interpreter keeps its objects at exit) (tests/CMakeLists.txt).
cmake -S . -B build-asan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DTIDEMARK_SANITIZE=ON -DTIDEMARK_WERROR=ON \
      -DTIDEMARK_BUILD_PYTHON=ON
cmake --build build-asan -j"$jobs"
# The whole-genome oracle tests (label genome) ran in the release pass; under the sanitizers they
# would take most of CI's time and cover no code path the other tests do not.
ASAN_OPTIONS=detect_leaks=1:abort_on_error=1 UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 \
  ctest --test-dir build-asan --output-on-failure --no-tests=error -j"$jobs" -LE genome

echo "== test: ThreadSanitizer build (unit tests; thread, early-sweep and writer-thread tests)" >&2
# The decoders' pool, the early sweeps of a record still being read, and the writers' threads
# (BGZF compression and indexing with -t 2..4, tracks joined as segments finish, bigWig) under
# ThreadSanitizer; the other tests run no code on more than one thread that these do not.
cmake -S . -B build-tsan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DTIDEMARK_TSAN=ON -DTIDEMARK_WERROR=ON
cmake --build build-tsan -j"$jobs" --target tidemark_cli tidemark_tests
TSAN_OPTIONS=halt_on_error=1:second_deadlock_stack=1 \
  ctest --test-dir build-tsan --output-on-failure --no-tests=error -j"$jobs" \
  -R '^(unit|oracle\.test_threads|cli\.writer_threads)$'

echo "== test: fuzzing each target for ${TIDEMARK_FUZZ_SECONDS:-30} s" >&2
bash scripts/fuzz.sh "${TIDEMARK_FUZZ_SECONDS:-30}"
