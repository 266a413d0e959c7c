#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Installs what is missing (Debian packages), builds rungcal, and runs the demo on
# sample_data/ with config/ defaults: the whole chain through rungcal-run, as a group server
# would run it nightly. Outputs go to demo_out/. Also builds the Python module rungcal
# (build-demo/python/, docs/python.md) when pybind11 is there (setup-debian.sh installs it).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup-debian.sh build
cmake -S . -B build-demo -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRUNGCAL_BUILD_TESTS=OFF >/dev/null
cmake --build build-demo -j"$(nproc)" >/dev/null
bin=build-demo/bin
# The demo starts from scratch: its own store would otherwise gain versions on every run.
rm -rf demo_out
mkdir -p demo_out/incoming
cp sample_data/calibrators.fits demo_out/incoming/calibrators.fits

run_chain() {
  local rc=0
  "$bin/rungcal-run" --config config/demo/pipeline.toml "$@" || rc=$?
  echo "   exit code $rc (docs/exit-codes.md)"
}

echo "== rungcal-run: light curves, ingest, deredden, fit, publish, report, apply (config/demo/pipeline.toml)"
run_chain
echo "== rungcal-run again: nothing changed, so nothing runs"
run_chain
echo "== a new data release lands in demo_out/incoming/: the same stars, parallaxes with smaller errors"
cp sample_data/calibrators_release2.fits demo_out/incoming/calibrators.fits
run_chain --dry-run
run_chain
echo "== diff: what the new release changed (truth in sample_data/truth.json: W_VI alpha -5.772, offset -0.010 mas)"
"$bin/rungcal-diff" --store demo_out/store --to halden-peak@latest
echo "== distance to the Veyra Spiral (truth: mu = 29.35)"
grep -v '^#' demo_out/distances_hosts.csv | awk -F, 'NR == 1 { for (i = 1; i <= NF; ++i) c[$i] = i; next } {
  printf "  %s: mu = %.3f +- %.3f (stat) +- %.3f (calibration) +- %.3f (systematic), d = %.2f +- %.2f Mpc, %d stars\n",
    $c["host"], $c["mu"], $c["mu_stat_err"], $c["mu_cal_err"], $c["mu_sys_err"], $c["distance_mpc"],
    $c["distance_err_mpc"], $c["n_stars"] }'
if [ -d build-demo/python/rungcal ]; then
  echo "== the same calibration from Python (docs/python.md): PYTHONPATH=build-demo/python /usr/bin/python3"
  PYTHONPATH=build-demo/python /usr/bin/python3 - <<'PY'
import rungcal
cal = rungcal.load_calibration("demo_out/store/halden-peak@latest")
M, M_err = cal.absolute_magnitude("W_VI", log_period=1.0, feh=0.0)
print(f"  {cal.label}: W_VI at log P = 1, [Fe/H] = 0: M = {M:.3f} +- {M_err:.3f} (calibration)")
PY
fi
echo
echo "Demo outputs:"
for f in demo_out/lightcurves.fits demo_out/lightcurves.csv demo_out/catalog.fits demo_out/catalog_rejects.csv \
         demo_out/catalog_dereddened.fits demo_out/fit.json demo_out/fit_residuals.fits \
         demo_out/store/halden-peak/latest demo_out/distances.fits demo_out/distances.csv demo_out/distances_hosts.csv \
         demo_out/distances_host_covariance.csv \
         demo_out/report/relations.tex demo_out/report/relations.md demo_out/report/stars_W_VI.tex \
         demo_out/report/pl_W_VI.pdf demo_out/report/versions_W_VI.pdf demo_out/report/lightcurve_HPO-C0001.pdf \
         demo_out/site/index.html demo_out/run_state.json demo_out/logs/rungcal-run.log; do
  echo "  $(pwd)/$f"
done
