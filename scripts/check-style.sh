#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Checks the C++ sources against the repository's .clang-format and .clang-tidy, and fails
# on any difference or warning. scripts/test.sh (so CI) runs it after the build.
# Usage: scripts/check-style.sh [BUILD_DIR]   (default: build; clang-tidy reads its
#        compile_commands.json, which every configure writes)
#   RUNGCAL_STYLE_JOBS=N  clang-tidy processes at once (default: nproc)
set -euo pipefail
cd "$(dirname "$0")/.."
build=${1:-build}
jobs=${RUNGCAL_STYLE_JOBS:-$(nproc)}

# Every C++ file the repository holds; a tarball without .git falls back to the folders.
list_sources() {
  if git rev-parse --is-inside-work-tree >/dev/null 2>&1; then
    git ls-files '*.cpp' '*.hpp'
  else
    find lib pipeline tests bench fuzz python -name '*.cpp' -o -name '*.hpp' | sort
  fi
}

mapfile -t sources < <(list_sources)
echo "style: clang-format on ${#sources[@]} files" >&2
if ! clang-format --dry-run -Werror "${sources[@]}"; then
  echo "style: the files above differ from .clang-format; run: clang-format -i FILE..." >&2
  exit 1
fi

# clang-tidy on the library and the stage mains: the code users run. Tests, benchmarks and
# fuzz targets are left to the compiler's warnings (gtest's macros trip several checks).
[ -f "$build/compile_commands.json" ] || {
  echo "style: $build/compile_commands.json is missing; configure with cmake first" >&2
  exit 1
}
mapfile -t tidy_sources < <(list_sources | grep -E '^(lib|pipeline)/.*\.cpp$')
echo "style: clang-tidy on ${#tidy_sources[@]} files, $jobs at a time" >&2
log=$(mktemp)
trap 'rm -f "$log"' EXIT
printf '%s\n' "${tidy_sources[@]}" |
  xargs -P "$jobs" -n 1 clang-tidy -p "$build" --quiet --warnings-as-errors='*' \
    >"$log" 2>&1 || {
  grep -E 'warning:|error:' "$log" | sort -u >&2
  echo "style: clang-tidy found the warnings above (.clang-tidy chooses the checks)" >&2
  exit 1
}
echo "style: clean" >&2
