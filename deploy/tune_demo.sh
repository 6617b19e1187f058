#!/usr/bin/env bash
# Tunes the demo's policies on the demo's invented history (README, "tune"): the demo feed
# (2,000 series, 156 weeks, the seed deploy/demo.sh uses) and its truth file, every default
# candidate of config/demo.yaml's four policies, then the recommended settings checked with
# check-config, their difference from the demo's, and the report photographed by Debian's
# headless chromium into deploy/screenshots/tune-report.png. About a minute.
set -euo pipefail
cd "$(dirname "$0")/.."

deploy/setup.sh --test
cmake -S . -B build/release -G Ninja -DCMAKE_BUILD_TYPE=Release -DFOREWARDEN_TESTS=OFF >/dev/null
cmake --build build/release --target forewarden
bin=build/release/daemon/forewarden
out=build/demo/tune
mkdir -p "$out"
"$bin" simulate --series 2000 --periods 156 --seed 20261201 --start 2024-01-01 \
  --output "$out/feed.csv" --truth "$out/truth.csv"
"$bin" tune --config config/demo.yaml --input "$out/feed.csv" --truth "$out/truth.csv" \
  --results "$out/results.csv" --settings-out "$out/recommended.yaml" --report "$out/report.html"
"$bin" check-config "$out/recommended.yaml" > /dev/null
echo "--- what the recommendation changes (diff config/demo.yaml $out/recommended.yaml):"
diff config/demo.yaml "$out/recommended.yaml" || true
mkdir -p deploy/screenshots
profile=$(mktemp -d)
trap 'rm -rf "$profile"' EXIT
chromium --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
  --disable-background-networking --disable-component-update --disable-sync \
  --user-data-dir="$profile" --hide-scrollbars --window-size=1100,1000 \
  --screenshot="$PWD/deploy/screenshots/tune-report.png" "file://$PWD/$out/report.html" 2>/dev/null
echo "report: $out/report.html; picture: deploy/screenshots/tune-report.png"
