#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Installs the Debian packages rungcal needs, only those that are missing.
# Usage: scripts/setup-debian.sh [build|test]
#   build: compiler, CMake and the C++ libraries, pybind11 and Python's headers and numpy for
#          the Python module (enough for the demo)
#   test : the above plus Debian's Python reference libraries used by the tests and Open MPI
set -euo pipefail
mode=${1:-build}

build_pkgs=(g++ cmake make pkg-config git libceres-dev libeigen3-dev libccfits-dev
  libcfitsio-dev libspdlog-dev libfmt-dev libgtest-dev libgmock-dev libcli11-dev
  libtomlplusplus-dev nlohmann-json3-dev libssl-dev libcairo2-dev libyaml-dev libexpat1-dev fonts-dejavu-core
  pybind11-dev python3-dev python3-numpy)
# clang-format, clang-tidy: the style check (scripts/check-style.sh); python3-pytest: the
# Python module's tests (python/tests, through ctest); openmpi: the suite
# runs the MPI stages on two local ranks (the build finds it and turns RUNGCAL_MPI on); bc:
# the MPI benchmark script; chromium: the status page is rendered headless in a test;
# texlive-*: pdflatex with AASTeX (texlive-publishers), which needs epsf.sty
# (texlive-plain-generic) and Helvetica metrics (texlive-fonts-recommended), so the paper
# tables are compiled in a test.
test_pkgs=(python3 python3-numpy python3-pytest python3-astropy python3-scipy python3-extinction
  python3-statsmodels clang clang-format clang-tidy openmpi-bin libopenmpi-dev bc chromium
  texlive-latex-base texlive-publishers texlive-plain-generic texlive-fonts-recommended)

pkgs=("${build_pkgs[@]}")
[ "$mode" = test ] && pkgs+=("${test_pkgs[@]}")

missing=()
for p in "${pkgs[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -gt 0 ]; then
  echo "setup: installing ${missing[*]}" >&2
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq
  apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
fi

# The fuzz targets (scripts/fuzz.sh) link clang's libFuzzer runtime, packaged per clang version.
if [ "$mode" = test ] && command -v clang >/dev/null; then
  major=$(clang -dumpversion | cut -d. -f1)
  if ! dpkg-query -W -f='${Status}' "libclang-rt-$major-dev" 2>/dev/null | grep -q "install ok installed"; then
    echo "setup: installing libclang-rt-$major-dev" >&2
    export DEBIAN_FRONTEND=noninteractive
    apt-get install -y -qq --no-install-recommends "libclang-rt-$major-dev" >/dev/null
  fi
fi
