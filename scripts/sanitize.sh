#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Builds the test suite and the stage executables with AddressSanitizer and
# UndefinedBehaviorSanitizer (RUNGCAL_SANITIZE, gcc) in a folder of their own and runs the
# tests under them. A finding stops the process that met it with exit code 23 (no stage
# uses that code: docs/exit-codes.md), so a test that expects a stage to fail with exit 1
# or 2 cannot pass on a sanitizer's exit; its stack is in the test's output.
#   scripts/sanitize.sh                      # the whole suite (DEVELOPERS.md: how long)
#   scripts/sanitize.sh -R '^Table'          # further ctest arguments select tests
#   RUNGCAL_ASAN_BUILD=DIR                   build folder (default: build-asan)
set -euo pipefail
cd "$(dirname "$0")/.."
build=${RUNGCAL_ASAN_BUILD:-build-asan}
cmake -S . -B "$build" -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRUNGCAL_SANITIZE=ON -DRUNGCAL_WERROR=ON \
  -DRUNGCAL_BUILD_TESTS=ON -DRUNGCAL_BUILD_PYTHON=OFF >/dev/null
# rungcal_tests depends on every stage executable; the benchmarks are not needed.
cmake --build "$build" --target rungcal_tests -j"$(nproc)"

export ASAN_OPTIONS="halt_on_error=1:print_stacktrace=1:detect_leaks=1:exitcode=23"
export UBSAN_OPTIONS="halt_on_error=1:print_stacktrace=1:exitcode=23"
# System libraries' leaks, each with its reason: scripts/sanitizers/lsan.supp.
export LSAN_OPTIONS="suppressions=$PWD/scripts/sanitizers/lsan.supp:print_suppressions=0"
# Left out: the installed package's consumer is built without the sanitizers and cannot
# link the instrumented libraries; the fuzz smoke run builds its own ASan + UBSan targets
# (scripts/fuzz.sh) and the include probe only compiles: the normal run has all three.
# The MPI test: Open MPI's plugins leak at MPI_Finalize and are unloaded before the leak
# check, so their leaks have no module name a suppression could match.
exclude='^(InstalledPackage|Fuzz|Build|Mpi)\.'
(cd "$build" && ctest --output-on-failure -j"$(nproc)" -E "$exclude" "$@")
