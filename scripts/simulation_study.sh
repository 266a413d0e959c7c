#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# The fit's simulation study (docs/method.md, "How well the fit does"): many mock catalogs
# per scenario, every contamination on, fitted as a user would, printed as two Markdown
# tables: bias in units of the mean reported error with the 68% coverage of the covariance
# and bootstrap intervals; then the mean bootstrap error over the mean covariance error and
# the spread of the estimates over the mean error.
#   bash scripts/simulation_study.sh [build-dir] [--quick] [--only N] [--large M] [--threads T]
# --quick: a tenth of the mocks and no bootstrap, for a first look (minutes, not hours).
# --only 300|3000: only the rows with that many stars. --threads: mocks fitted at once.
# --large M: mocks per N = 3000 row (default 50, the acceptance's minimum). An exactly
# unbiased fit with exact errors shows all four acceptance rows inside the acceptance with
# probability 0.002 at 100 mocks, 0.15 at 200 and 0.80 at 400 (docs/method.md, "What a
# table of this size can show"), so showing the acceptance at N = 3000 takes about 400 a row:
# some 6 core-hours for the four rows, without the bootstrap.
# Each row's summary is kept as JSON in <build-dir>/study/ (rerunning a row overwrites it).
set -euo pipefail
cd "$(dirname "$0")/.."
build=${1:-build}
shift || true
small=200 large=50 boot=50 only="" threads=0
while [[ $# -gt 0 ]]; do
  case $1 in
    --quick) small=20 large=5 boot=0 ;;
    --only) only=$2; shift ;;
    --threads) threads=$2; shift ;;
    --large) large=$2; shift ;;
    *) echo "simulation_study.sh: unknown option $1" >&2; exit 2 ;;
  esac
  shift
done
study="$build/bin/rungcal-study"
out="$build/study"
mkdir -p "$out"
rows=()

row() {  # file stem, label, then rungcal-study options
  local stem=$1 label=$2; shift 2
  local stars
  stars=$(printf '%s\n' "$@" | grep -A1 -x -- --stars | tail -1)
  if [[ -n "$only" && "$stars" != "$only" ]]; then return; fi
  echo "simulation_study: $label, N = $stars" >&2
  "$study" --threads "$threads" --out "$out/$stem.json" "$@" >/dev/null
  printf '%s\t%s\n' "$label" "$out/$stem.json" >>"$out/rows.tsv"
}

: >"$out/rows.tsv"
for rel in wesenheit optical; do
  for dist in disk flat_modulus clumpy; do
    for n in 300 3000; do
      mocks=$small
      [[ $n == 3000 ]] && mocks=$large
      row "hierarchical_${rel}_${dist}_$n" "hierarchical, $rel, $dist" --relation "$rel" --distances "$dist" \
        --stars "$n" --mocks "$mocks" --bootstrap "$boot"
    done
  done
done
for space in parallax magnitude; do
  for rel in wesenheit optical; do
    row "${space}_huber_${rel}_disk_3000" "$space space + Huber, $rel, disk" --space "$space" --relation "$rel" \
      --distances disk --stars 3000 --mocks "$large"
  done
done

/usr/bin/python3 - "$out/rows.tsv" <<'PY'
import json, sys
rows = [line.rstrip("\n").split("\t") for line in open(sys.argv[1]) if line.strip()]
f = lambda v, fmt: "n/a" if v is None else format(v, fmt)
names = ["alpha", "beta", "gamma", "parallax_offset_mas", "sigma_int"]
def table(title, cell):
    print(title)
    print("| scenario | N | mocks | alpha | beta | gamma | offset | sigma_int |")
    print("|---|---|---|---|---|---|---|---|")
    for label, path in rows:
        r = json.load(open(path))
        by = {p["name"]: p for p in r["parameters"]}
        cells = [cell(by[n]) if n in by else "" for n in names]
        print(f"| {label} | {r['stars']} | {r['mocks'] - r['failed']} | " + " | ".join(cells) + " |")
    print()
table("bias / mean error +- its uncertainty, 68% coverage (covariance), 68% coverage (bootstrap):",
      lambda p: f"{f(p['bias_in_errors'], '+.2f')} +- {f(p['bias_uncertainty'], '.2f')} / {f(p['coverage_68'], '.2f')} / {f(p['bootstrap_coverage_68'], '.2f')}")
table("mean bootstrap error / mean covariance error, sd of the estimates / mean error:",
      lambda p: f"{f(p.get('bootstrap_to_covariance'), '.2f')} / {f(p.get('spread_to_error'), '.2f')}")
PY
