#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Installs what is missing (Debian packages), builds rungcal, and runs the demo on
# sample_data/ with config/ defaults. Outputs go to demo_out/.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup-debian.sh build
cmake -S . -B build-demo -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRUNGCAL_BUILD_TESTS=OFF >/dev/null
cmake --build build-demo -j"$(nproc)" >/dev/null
bin=build-demo/bin
# The demo starts from scratch: its own store would otherwise gain versions on every run.
rm -rf demo_out
mkdir -p demo_out
echo "== lightcurve: periods and intensity-mean magnitudes from the V, I, Ks time series (sample_data/lightcurves.csv)"
"$bin/rungcal-lightcurve" --config config/demo/lightcurve.toml
echo "== ingest: Halden Peak Observatory calibrators (sample_data/calibrators.fits), light-curve periods and means joined"
"$bin/rungcal-ingest" --config config/demo/ingest.toml --lightcurves demo_out/lightcurves.fits
echo "== deredden: extinction-corrected and Wesenheit magnitudes"
"$bin/rungcal-deredden" --config config/demo/deredden.toml
echo "== fit: period-luminosity relations in parallax space (truth: sample_data/truth.json)"
"$bin/rungcal-fit" --config config/demo/fit.toml
echo "== publish: the next version of the 'halden-peak' calibration (unchanged reruns make none)"
"$bin/rungcal-publish" --store demo_out/store --name halden-peak --fit demo_out/fit.json \
  --residuals demo_out/fit_residuals.fits --config config/demo/fit.toml
echo "== a new data release arrives: the same stars, parallaxes with smaller errors"
r2=demo_out/release2
"$bin/rungcal-ingest" --config config/demo/ingest.toml --input sample_data/calibrators_release2.fits --out $r2/catalog.fits \
  --lightcurves demo_out/lightcurves.fits
"$bin/rungcal-deredden" --config config/demo/deredden.toml --input $r2/catalog.fits --out $r2/catalog_dereddened.fits
"$bin/rungcal-fit" --config config/demo/fit.toml --input $r2/catalog_dereddened.fits --out $r2/fit.json >/dev/null
"$bin/rungcal-publish" --store demo_out/store --name halden-peak --fit $r2/fit.json \
  --residuals $r2/fit_residuals.fits --config config/demo/fit.toml
echo "== diff: what the new release changed"
"$bin/rungcal-diff" --store demo_out/store --to halden-peak@latest
echo "== apply: distances to the Veyra Spiral's Cepheids (truth: mu = 29.35)"
"$bin/rungcal-ingest" --config config/demo/ingest_targets.toml
"$bin/rungcal-deredden" --config config/demo/deredden_targets.toml
"$bin/rungcal-apply" --store demo_out/store --calibration halden-peak@latest --relation W_VI \
  --targets demo_out/targets_dereddened.fits --out demo_out/distances.fits
echo "== report: paper tables and figures of both versions side by side, and light curves"
"$bin/rungcal-report" --store demo_out/store --calibration halden-peak@1 --calibration halden-peak@2 --out demo_out/report \
  --lightcurves demo_out/lightcurves.fits
echo
echo "Demo outputs:"
for f in demo_out/lightcurves.fits demo_out/lightcurves.csv demo_out/catalog.fits demo_out/catalog_rejects.csv demo_out/catalog_dereddened.fits \
         demo_out/fit.json demo_out/fit_residuals.fits demo_out/store/halden-peak/latest \
         demo_out/distances.fits demo_out/distances.csv demo_out/distances_hosts.csv \
         demo_out/report/relations.tex demo_out/report/relations.md demo_out/report/stars_W_VI.tex \
         demo_out/report/pl_W_VI.pdf demo_out/report/versions_W_VI.pdf demo_out/report/lightcurve_HPO-C0001.pdf; do
  echo "  $(pwd)/$f"
done
