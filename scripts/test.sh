#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Installs what is missing (Debian packages, including the Python reference libraries the
# tests compare against), builds with warnings as errors, and runs the whole test suite.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup-debian.sh test
cmake -S . -B build -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRUNGCAL_WERROR=ON -DRUNGCAL_BUILD_TESTS=ON >/dev/null
cmake --build build -j"$(nproc)"
cd build && ctest --output-on-failure -j"$(nproc)"
