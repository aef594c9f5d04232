#!/bin/sh
# The demo: builds tarn and runs the invented station hollin-buoy-1 on
# simulated instruments against a real local mosquitto. Ends by itself.
set -eu
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
"$ROOT/.ci/install-deps"
cmake -S "$ROOT" -B "$ROOT/build" -DCMAKE_BUILD_TYPE=RelWithDebInfo -DTARN_TESTS=OFF >/dev/null
cmake --build "$ROOT/build" -j2 --target tarn
exec timeout --kill-after=10 330 /usr/bin/python3 "$ROOT/demo/run_demo.py" "$ROOT/build/daemon/tarn"
