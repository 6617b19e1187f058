#!/usr/bin/env bash
# Makes the README's pictures of the planner page: runs the browser test that photographs each
# view (tests/integration/page_test.py, Debian's chromium, an invented feed) and copies two of
# its screenshots to deploy/screenshots/. Nothing is drawn by hand.
set -euo pipefail
cd "$(dirname "$0")/.."

deploy/setup.sh --test
cmake -S . -B build/release -G Ninja -DCMAKE_BUILD_TYPE=Release -DFOREWARDEN_TESTS=OFF >/dev/null
cmake --build build/release --target forewarden
FOREWARDEN_BINARY=build/release/daemon/forewarden FOREWARDEN_BUILD_DIR=build/release \
  /usr/bin/python3 tests/integration/page_test.py test_each_view_at_1280_and_360_wide_with_screenshots_and_timing
mkdir -p deploy/screenshots
cp build/release/screenshots/attention.png build/release/screenshots/series-view.png deploy/screenshots/
cat build/release/screenshots/timing.txt
echo "screenshots: deploy/screenshots/attention.png, deploy/screenshots/series-view.png"
