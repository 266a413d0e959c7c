#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Installs what is missing (Debian packages, including the Python reference libraries the
# tests compare against), builds with warnings as errors, runs the whole test suite, and
# checks the sources against .clang-format and .clang-tidy.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup-debian.sh test
cmake -S . -B build -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRUNGCAL_WERROR=ON -DRUNGCAL_BUILD_TESTS=ON >/dev/null
cmake --build build -j"$(nproc)"
(cd build && ctest --output-on-failure -j"$(nproc)")
# clang-format and clang-tidy, as .clang-format and .clang-tidy choose: any difference fails.
bash scripts/check-style.sh build
