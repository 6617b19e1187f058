#!/usr/bin/env bash
# The planner page's reads at a million series; Release build; see page_bench.py (about
# 2 minutes, 2 GB of disk).
#   tests/bench/page_bench.sh [SERIES=1000000]
set -euo pipefail
cd "$(dirname "$0")/../.."
deploy/setup.sh
cmake -S . -B build/bench -G Ninja -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build/bench --target forewarden
/usr/bin/python3 tests/bench/page_bench.py build/bench/daemon/forewarden build/bench/page "${1:-1000000}"
