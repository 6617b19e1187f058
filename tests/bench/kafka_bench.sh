#!/usr/bin/env bash
# Kafka ingest benchmark of `forewarden serve` against HTTP ingest (Release build); see
# kafka_bench.py.
#   tests/bench/kafka_bench.sh [SERIES=20000] [WEEKS=25]
set -euo pipefail
cd "$(dirname "$0")/../.."
deploy/setup.sh --test
cmake -S . -B build/bench -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build/bench --target forewarden forewarden_kafka_mock
work=build/bench/kafka
rm -rf "$work"
mkdir -p "$work"
/usr/bin/python3 tests/bench/kafka_bench.py build/bench "$work" "${1:-20000}" "${2:-25}"
rm -rf "$work"
