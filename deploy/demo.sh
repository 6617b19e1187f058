#!/usr/bin/env bash
# Quick start, part 1: install what is missing, build (Release), invent a demo feed for a chain
# of garden and hardware stores, and run it through the engine with config/demo.yaml.
# Output lands in build/demo/: feed.csv, truth.csv (injected changes), replay.csv.
set -euo pipefail
cd "$(dirname "$0")/.."

deploy/setup.sh
cmake -S . -B build/release -G Ninja -DCMAKE_BUILD_TYPE=Release -DFOREWARDEN_TESTS=OFF >/dev/null
cmake --build build/release --target forewarden

bin=build/release/daemon/forewarden
out=build/demo
mkdir -p "$out"
"$bin" check-config config/demo.yaml
"$bin" simulate --series 2000 --periods 156 --seed 20261201 \
  --output "$out/feed.csv" --truth "$out/truth.csv"
"$bin" replay --config config/demo.yaml --input "$out/feed.csv" --output "$out/replay.csv"

echo
echo "demo: $(($(wc -l < "$out/feed.csv") - 1)) actuals in $out/feed.csv, $(($(wc -l < "$out/truth.csv") - 1)) injected changes in $out/truth.csv"
echo "demo: series with a rule holding in the last week (first 10):"
last=$(tail -n 1 "$out/feed.csv" | cut -d, -f2)
awk -F, -v last="$last" 'NR > 1 && $2 == last && $14 != "" {
      printf "  %-28s actual %6s  forecast %8.1f  trigg %6.2f  cusum %6.1f  rules %s\n", $1, $3, $4, $10, $11, $14}' \
  "$out/replay.csv" | head -n 10
