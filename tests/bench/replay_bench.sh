#!/usr/bin/env bash
# Replay benchmark: Release build, invented feed of SERIES x PERIODS weeks (default
# 100,000 x 104 = 10.4 M actuals, ~410 MB in, ~2.3 GB out; needs ~6 GB of disk and ~8 GB of
# memory for the NumPy baseline), then tests/bench/run_bench.py. Not part of the test suite.
#   tests/bench/replay_bench.sh [SERIES] [PERIODS]
set -euo pipefail
cd "$(dirname "$0")/../.."
series=${1:-100000}
periods=${2:-104}

deploy/setup.sh --test
cmake -S . -B build/bench -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build/bench --target forewarden forewarden_bench_csv
work=build/bench/data
mkdir -p "$work"
build/bench/daemon/forewarden simulate --series "$series" --periods "$periods" --seed 1 \
  --output "$work/feed.csv"
/usr/bin/python3 tests/bench/run_bench.py build/bench "$work" "$series" "$periods"
rm -f "$work"/*.csv
