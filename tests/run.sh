#!/bin/sh
# The test command: installs what is missing, builds with warnings as errors
# under AddressSanitizer + UndefinedBehaviorSanitizer, runs every unit and
# integration test, then a bounded libFuzzer run of every fuzz target.
# Usage: tests/run.sh [ctest -R regex]
set -eu
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
"$ROOT/.ci/install-deps"
B="$ROOT/build-test"
cmake -S "$ROOT" -B "$B" -DCMAKE_BUILD_TYPE=Debug -DTARN_WERROR=ON -DTARN_SANITIZE=ON >/dev/null
cmake --build "$B" -j2
export ASAN_OPTIONS="detect_leaks=1:abort_on_error=1"
export UBSAN_OPTIONS="print_stacktrace=1:halt_on_error=1"
if [ $# -gt 0 ]; then
  ctest --test-dir "$B" --output-on-failure -j2 -R "$1"
  exit $?
fi
ctest --test-dir "$B" --output-on-failure -j2
# Bounded fuzzing with Debian's clang (libFuzzer).
F="$ROOT/build-fuzz"
cmake -S "$ROOT" -B "$F" -DTARN_FUZZ=ON -DCMAKE_BUILD_TYPE=RelWithDebInfo \
  -DCMAKE_C_COMPILER=clang-14 -DCMAKE_CXX_COMPILER=clang++-14 >/dev/null
cmake --build "$F" -j2
"$ROOT/tests/fuzz/run_all.sh" "$F" "${TARN_FUZZ_SECONDS:-30}"
echo "tests/run.sh: all tests passed"
