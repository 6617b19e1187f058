#!/usr/bin/env bash
# The habits CI checks besides the tests: formatting (clang-format, a dry run that fails on any
# drift) and clang-tidy (.clang-tidy: bugprone and performance, warnings as errors) over the
# sources of monitors/, config/ and daemon/. Needs a configured build for compile_commands.json.
#   deploy/lint.sh [BUILD_DIR]      (default build/lint, configured here when missing)
set -euo pipefail
cd "$(dirname "$0")/.."
build=${1:-build/lint}
mapfile -t sources < <(git ls-files '*.h' '*.cpp')
echo "lint: clang-format over ${#sources[@]} files"
clang-format --dry-run --Werror "${sources[@]}"
if [[ ! -f "$build/compile_commands.json" ]]; then
  cmake -S . -B "$build" -G Ninja -DCMAKE_BUILD_TYPE=Debug -DFOREWARDEN_TESTS=OFF >/dev/null
fi
echo "lint: clang-tidy (-j $(nproc))"
run-clang-tidy -p "$build" -j "$(nproc)" -quiet "$(pwd)/(monitors|config|daemon)/.*\.cpp$" > "$build/clang-tidy.log" 2>&1 || {
  grep -E "warning:|error:" "$build/clang-tidy.log" | sort -u | head -50
  echo "lint: clang-tidy found problems (whole log: $build/clang-tidy.log)"
  exit 1
}
echo "lint: clean"
