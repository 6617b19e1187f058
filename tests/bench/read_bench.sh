#!/usr/bin/env bash
# Do reads pause ingest? Release build; see read_bench.py (about 4 minutes, 1 GB of disk).
#   tests/bench/read_bench.sh [SERIES=1000000]
set -euo pipefail
cd "$(dirname "$0")/../.."
deploy/setup.sh
cmake -S . -B build/bench -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build/bench --target forewarden
/usr/bin/python3 tests/bench/read_bench.py build/bench/daemon/forewarden build/bench/read "${1:-1000000}"
