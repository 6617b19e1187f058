#!/usr/bin/env bash
# Quick start, part 2: install what is missing (including the reference libraries the tests
# compare against), build with AddressSanitizer + UndefinedBehaviorSanitizer, run every test.
set -euo pipefail
cd "$(dirname "$0")/.."

deploy/setup.sh --test
cmake -S . -B build/test -G Ninja -DCMAKE_BUILD_TYPE=RelWithDebInfo -DFOREWARDEN_SANITIZE=ON \
  -DFOREWARDEN_WERROR="${CI:+ON}" >/dev/null
cmake --build build/test
cd build/test
ctest --output-on-failure --timeout 600 -j 2
