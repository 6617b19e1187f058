#!/usr/bin/env bash
# Builds the libFuzzer targets with clang (ASan + UBSan) and runs each for SECONDS (default 20)
# on a scratch copy of its committed seed corpus, after replaying every saved regression input.
# CI runs it with the default; run longer by hand, e.g. `tests/fuzz/run.sh 600`.
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds="${1:-20}"
CC=clang CXX=clang++ cmake -S . -B build/fuzz -G Ninja -DCMAKE_BUILD_TYPE=RelWithDebInfo \
  -DFOREWARDEN_FUZZ=ON -DFOREWARDEN_TESTS=OFF -DFOREWARDEN_SANITIZE=ON >/dev/null
targets=(ingest settings http)
cmake --build build/fuzz --target "${targets[@]/#/forewarden_fuzz_}"
for t in "${targets[@]}"; do
  bin="build/fuzz/tests/fuzz/forewarden_fuzz_$t"
  # saved crashes first: each must now pass
  for f in tests/fuzz/regressions/"$t"-*; do
    [[ -e "$f" ]] || continue
    "$bin" "$f" >/dev/null 2>&1 || { echo "fuzz: regression $f fails again"; "$bin" "$f"; exit 1; }
  done
  work="build/fuzz/corpus-$t"
  rm -rf "$work" && mkdir -p "$work" && cp tests/fuzz/corpus/"$t"/* "$work"/
  echo "fuzz: $t for ${seconds}s"
  log="build/fuzz/fuzz-$t.log"
  if ! "$bin" "$work" -max_total_time="$seconds" -rss_limit_mb=4096 -print_final_stats=1 \
       -artifact_prefix=build/fuzz/ >"$log" 2>&1; then
    tail -40 "$log"
    echo "fuzz: $t found a crash (build/fuzz/crash-*); save it as tests/fuzz/regressions/$t-NAME"
    exit 1
  fi
  grep -E "^stat::number_of_executed_units" "$log" || true
done
