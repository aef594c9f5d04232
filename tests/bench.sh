#!/bin/sh
# The benchmarks, on an optimised build (not the sanitizer build of the test
# command): builds build-bench/ (Release, -j2) and runs each bench, which
# prints its own figures (medians, and ratios against references measured in
# the same run). Usage: tests/bench.sh [codec|pipeline|store|uplink ...]
set -eu
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
"$ROOT/.ci/install-deps"
B="$ROOT/build-bench"
cmake -S "$ROOT" -B "$B" -DCMAKE_BUILD_TYPE=Release >/dev/null
which="${*:-codec pipeline store uplink}"
for b in $which; do cmake --build "$B" -j2 --target "bench_$b"; done
for b in $which; do
  echo "== bench_$b"
  (cd "$B" && "./tests/bench_$b")
done
