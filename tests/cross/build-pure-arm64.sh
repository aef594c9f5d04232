#!/bin/sh
# Cross-builds the pure unit tests (test_codec, test_pipeline: standard library
# and the header-only Catch2 v2 only) for arm64 with Debian's cross compiler,
# statically linked, and runs them under qemu-user.
#
#   tests/cross/build-pure-arm64.sh [OUT_DIR] [-- catch2 args...]
#
# Needs: g++-aarch64-linux-gnu, qemu-user-static, catch2 (.ci/install-deps).
# No project-wide configure: the whole daemon would need every -dev:arm64
# package (systemd/CROSS.md); these two binaries need none.
# Exit: 0 both binaries built and passed under qemu; else the failing step's code.
set -eu

SRC=$(cd "$(dirname "$0")/../.." && pwd)
OUT=${1:-/tmp/tarn-cross-arm64}
[ $# -gt 0 ] && shift
[ "${1:-}" = "--" ] && shift
CXX=${CXX_ARM64:-aarch64-linux-gnu-g++}
QEMU=${QEMU_ARM64:-qemu-aarch64-static}
SYSROOT=${ARM64_SYSROOT:-/usr/aarch64-linux-gnu}
JOBS=${JOBS:-2}

command -v "$CXX" >/dev/null || { echo "build-pure-arm64: $CXX not found; install g++-aarch64-linux-gnu" >&2; exit 69; }
command -v "$QEMU" >/dev/null || { echo "build-pure-arm64: $QEMU not found; install qemu-user-static" >&2; exit 69; }
[ -f /usr/include/catch2/catch.hpp ] || { echo "build-pure-arm64: /usr/include/catch2/catch.hpp not found; install catch2" >&2; exit 69; }

mkdir -p "$OUT/include" "$OUT/obj"
# Catch2 is header-only: give the cross compiler that one directory, never the
# host's whole /usr/include (its glibc headers are the host's).
ln -sfn /usr/include/catch2 "$OUT/include/catch2"

# The flags go through a gcc response file: it keeps the quotes of the
# string define intact across xargs and sh -c.
printf '%s\n' "-std=c++20 -O1 -Wall -Wextra -Wpedantic -Wno-psabi -I$SRC -I$OUT/include" \
  "-DTARN_SOURCE_DIR=\\\"$SRC\\\"" > "$OUT/cxxflags"

compile() {  # compile LIST_FILE: one source per line -> $OUT/obj/<flattened name>.o
  # shellcheck disable=SC2016
  xargs -P "$JOBS" -I{} sh -c '
    src={}; obj="$0/obj/$(echo "$src" | sed "s|^$1/||; s|/|_|g").o"
    if [ ! -f "$obj" ] || [ "$src" -nt "$obj" ]; then
      echo "  CXX $src"; "$2" @"$0/cxxflags" -c "$src" -o "$obj"
    fi' "$OUT" "$SRC" "$CXX" < "$1"
}

objs_for() {  # objs_for LIST_FILE
  sed "s|^$SRC/||; s|/|_|g; s|\$|.o|; s|^|$OUT/obj/|" "$1" | tr '\n' ' '
}

ls "$SRC"/codec/*.cpp "$SRC"/tests/codec/*.cpp "$SRC"/tests/catch_main.cpp > "$OUT/codec.list"
ls "$SRC"/config/settings/*.cpp "$SRC"/daemon/pipeline/*.cpp "$SRC"/tests/pipeline/*.cpp "$SRC"/tests/catch_main.cpp > "$OUT/pipeline.list"
echo "build-pure-arm64: compiling with $("$CXX" --version | head -1)"
sort -u "$OUT/codec.list" "$OUT/pipeline.list" > "$OUT/all.list"
compile "$OUT/all.list"
# shellcheck disable=SC2046
$CXX -static -o "$OUT/test_codec" $(objs_for "$OUT/codec.list")
# shellcheck disable=SC2046
$CXX -static -o "$OUT/test_pipeline" $(objs_for "$OUT/pipeline.list")
file "$OUT/test_codec" "$OUT/test_pipeline"

rc=0
for t in test_codec test_pipeline; do
  echo "build-pure-arm64: running $t under $QEMU"
  # Tests that start a host program (python3 for the sun-position reference)
  # run it natively: qemu-user passes exec of a host binary through the kernel.
  (cd "$SRC" && TARN_SOURCE_DIR="$SRC" "$QEMU" -L "$SYSROOT" "$OUT/$t" "$@") || rc=$?
  [ $rc -ne 0 ] && { echo "build-pure-arm64: $t failed (exit $rc)" >&2; exit $rc; }
done
echo "build-pure-arm64: both test binaries passed under $QEMU"
