#!/usr/bin/env bash
# Forecast export benchmark: Release build; see export_bench.py (about 3 minutes at 1,000,000
# series, 1.5 GB of disk).
#   tests/bench/export_bench.sh [SERIES=1000000]
set -euo pipefail
cd "$(dirname "$0")/../.."
deploy/setup.sh
cmake -S . -B build/bench -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build/bench --target forewarden
/usr/bin/python3 tests/bench/export_bench.py build/bench/daemon/forewarden build/bench/export "${1:-1000000}"
