#!/usr/bin/env bash
# ThreadSanitizer run of the concurrent parts: the engine's unit and integration tests (Catch2)
# and the end-to-end tests that drive the HTTP server, the engine, the delivery worker and the
# drop folder from several threads and processes. Any data race stops the process (exit 66), so
# the test that started it fails. CI runs it after deploy/test.sh.
set -euo pipefail
cd "$(dirname "$0")/.."
deploy/setup.sh --test
cmake -S . -B build/tsan -G Ninja -DCMAKE_BUILD_TYPE=RelWithDebInfo -DFOREWARDEN_TSAN=ON \
  -DFOREWARDEN_WERROR="${CI:+ON}" >/dev/null
cmake --build build/tsan --target forewarden forewarden_tests
export TSAN_OPTIONS="halt_on_error=1 exitcode=66 second_deadlock_stack=1"
build/tsan/tests/forewarden_tests "[integration]"
cd build/tsan
# (the sharing browser test needs the Kafka mock cluster program, which does not start when
# built with ThreadSanitizer: left to the ASan run)
ctest --output-on-failure --timeout 600 -j 2 -L "serve|alerts|crash|deploy|tls|security|browser" \
  -E "instances_sharing"
