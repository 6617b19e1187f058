#!/usr/bin/env bash
# Metrics benchmark (Release build); see metrics_bench.py.
#   tests/bench/metrics_bench.sh [SERIES...]
set -euo pipefail
cd "$(dirname "$0")/../.."
deploy/setup.sh --test
cmake -S . -B build/bench -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build/bench --target forewarden
work=build/bench/metrics
mkdir -p "$work"
/usr/bin/python3 tests/bench/metrics_bench.py build/bench "$work" "$@"
rm -rf "$work"
