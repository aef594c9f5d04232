#!/bin/sh
# Runs every libFuzzer target in BUILD_DIR/tests/fuzz for SECONDS each, from
# its seed corpus in tests/fuzz/corpus/<name without fuzz_>/ (if present).
set -eu
B="$1"; SECS="${2:-30}"
HERE="$(cd "$(dirname "$0")" && pwd)"
status=0
for f in "$B"/tests/fuzz/fuzz_*; do
  [ -x "$f" ] || continue
  n="$(basename "$f")"
  corpus="$HERE/corpus/${n#fuzz_}"
  work="$(mktemp -d)"
  [ -d "$corpus" ] && cp -r "$corpus"/. "$work"/ 2>/dev/null || true
  echo "fuzz: $n for ${SECS}s"
  if ! "$f" -max_total_time="$SECS" -rss_limit_mb=2048 -print_final_stats=1 "$work" >"$work.log" 2>&1; then
    tail -40 "$work.log"; status=1
  else
    grep -E "stat::number_of_executed_units|stat::peak_rss_mb" "$work.log" | sed "s/^/  /"
  fi
  rm -rf "$work" "$work.log"
done
exit $status
