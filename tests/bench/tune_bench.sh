#!/usr/bin/env bash
# Tune benchmark: Release build, then tests/bench/tune_bench.py (README, "Tune benchmark").
# Not part of the test suite. About 3 minutes at the default 100,000 series x 104 weeks.
#   tests/bench/tune_bench.sh [SERIES] [PERIODS]
set -euo pipefail
cd "$(dirname "$0")/../.."
deploy/setup.sh --test
cmake -S . -B build/release -G Ninja -DCMAKE_BUILD_TYPE=Release -DFOREWARDEN_TESTS=OFF >/dev/null
cmake --build build/release --target forewarden
work=build/release/tune-bench
mkdir -p "$work"
/usr/bin/python3 tests/bench/tune_bench.py --binary build/release/daemon/forewarden \
  --series "${1:-100000}" --periods "${2:-104}" --work "$work"
rm -f "$work"/*.csv
