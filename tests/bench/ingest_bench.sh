#!/usr/bin/env bash
# Durable-ingest benchmark of `forewarden serve` (Release build); see ingest_bench.py.
#   tests/bench/ingest_bench.sh [SERIES=20000] [WEEKS=25] [MEMORY_SERIES=1000000]
set -euo pipefail
cd "$(dirname "$0")/../.."
deploy/setup.sh --test
cmake -S . -B build/bench -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build/bench --target forewarden forewarden_bench_sqlite
work=build/bench/ingest
mkdir -p "$work"
/usr/bin/python3 tests/bench/ingest_bench.py build/bench "$work" "${1:-20000}" "${2:-25}" "${3:-1000000}"
rm -rf "$work"
