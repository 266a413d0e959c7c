#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# The fit's simulation study (docs/method.md, "How well the fit does"): many mock catalogs
# per scenario, every contamination on, fitted as a user would, printed as a Markdown table
# of bias in units of the mean reported error and 68% coverage (covariance and bootstrap).
#   bash scripts/simulation_study.sh [build-dir] [--quick]
# --quick: a tenth of the mocks and no bootstrap, for a first look (minutes, not an hour).
set -euo pipefail
cd "$(dirname "$0")/.."
build=${1:-build}
quick=${2:-}
study="$build/bin/rungcal-study"
small=200 large=50 boot=50
if [[ "$quick" == "--quick" ]]; then small=20 large=5 boot=0; fi

row() {  # label, then rungcal-study options
  local label=$1; shift
  local json
  json=$(mktemp)
  "$study" --out "$json" "$@" >/dev/null
  /usr/bin/python3 - "$label" "$json" <<'PY'
import json, sys
label, path = sys.argv[1], sys.argv[2]
r = json.load(open(path))
cells = []
for p in r["parameters"]:
    f = lambda v, fmt: "n/a" if v is None else format(v, fmt)
    cells.append(f"{f(p['bias_in_errors'], '+.2f')} / {f(p['coverage_68'], '.2f')} / {f(p['bootstrap_coverage_68'], '.2f')}")
print(f"| {label} | {r['stars']} | {r['mocks'] - r['failed']} | " + " | ".join(cells) + " |")
PY
  rm -f "$json"
}

echo "| scenario | N | mocks | alpha | beta | gamma | offset | sigma_int |"
echo "|---|---|---|---|---|---|---|---|"
for rel in wesenheit optical; do
  for dist in disk flat_modulus clumpy; do
    row "hierarchical, $rel, $dist" --relation "$rel" --distances "$dist" --stars 300 --mocks "$small" --bootstrap "$boot"
    row "hierarchical, $rel, $dist" --relation "$rel" --distances "$dist" --stars 3000 --mocks "$large" --bootstrap "$boot"
  done
done
for space in parallax magnitude; do
  for rel in wesenheit optical; do
    row "$space space + Huber, $rel, disk" --space "$space" --relation "$rel" --distances disk --stars 3000 --mocks "$large"
  done
done
