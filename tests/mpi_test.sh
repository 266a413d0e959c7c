#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Two local MPI ranks give the same products, byte for byte, as one process: light-curve
# summary and Fourier tables, the fit's bootstrap resamples and errors, the grid's budget.
# Usage: tests/mpi_test.sh SOURCE_DIR BUILD_DIR
set -euo pipefail
src=$1
bin=$2/bin
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cfg=$src/config/demo
mpi=(mpirun -n 2 --oversubscribe)
# Open MPI refuses root unless told; CI containers run as root.
[ "$(id -u)" = 0 ] && mpi+=(--allow-run-as-root)

"$bin/rungcal-lightcurve" -q --config "$cfg/lightcurve.toml" --out "$work/one/lc.fits"
"${mpi[@]}" "$bin/rungcal-lightcurve" -q --config "$cfg/lightcurve.toml" --out "$work/two/lc.fits" \
  --log-file "$work/two/lc.log"
# The work really was split: rank 1 logged its half of the 100 stars.
grep -q "rank 1 of 2: 50 of 100 items" "$work/two/lc.log.rank1" ||
  { echo "FAIL: rank 1 did not take half of the stars" >&2; exit 1; }

# A failure on one rank only (star 7 is rank 1's, made to fail as bad input would) stops
# both ranks with its rule and exit 2, and nothing is written: rank 0 does not wait forever.
set +e
RUNGCAL_FAULT_THROW=distributed_item:7 timeout 120 "${mpi[@]}" -x RUNGCAL_FAULT_THROW \
  "$bin/rungcal-lightcurve" -q --config "$cfg/lightcurve.toml" --out "$work/fail/lc.fits" \
  > "$work/fail.txt" 2>&1
rc=$?
set -e
[ "$rc" = 2 ] || { echo "FAIL: one failing rank gave exit $rc, not 2:" >&2; cat "$work/fail.txt" >&2; exit 1; }
[ "$(grep -c 'injected_fault' "$work/fail.txt")" = 2 ] ||
  { echo "FAIL: both ranks should report the failure:" >&2; cat "$work/fail.txt" >&2; exit 1; }
[ ! -e "$work/fail/lc.fits" ] || { echo "FAIL: a failed run wrote lc.fits" >&2; exit 1; }

"$bin/rungcal-ingest" -q --config "$cfg/ingest.toml" --lightcurves "$work/one/lc.fits" \
  --out "$work/catalog.fits"
"$bin/rungcal-deredden" -q --config "$cfg/deredden.toml" --input "$work/catalog.fits" \
  --out "$work/dered.fits"
for n in one two; do
  run=("$bin/rungcal-fit")
  [ $n = two ] && run=("${mpi[@]}" "$bin/rungcal-fit")
  "${run[@]}" -q --config "$cfg/fit.toml" --input "$work/dered.fits" --bootstrap 240 \
    --out "$work/$n/fit.json" > /dev/null
  run=("$bin/rungcal-grid")
  [ $n = two ] && run=("${mpi[@]}" "$bin/rungcal-grid")
  "${run[@]}" -q --config "$cfg/grid.toml" --catalog "$work/catalog.fits" --out "$work/$n/grid" \
    > /dev/null
done

# Text products: identical but for their write time.
strip_time() { grep -v -E '^# DATE = |"created_utc"' "$1"; }
for f in lc.csv fit.json grid/error_budget.csv grid/grid.json; do
  if ! diff <(strip_time "$work/one/$f") <(strip_time "$work/two/$f") > "$work/diff.txt"; then
    echo "FAIL: $f differs between one process and two ranks:" >&2
    head -20 "$work/diff.txt" >&2
    exit 1
  fi
done
# FITS products: every table's data bytes identical (headers carry the write time).
/usr/bin/python3 - "$work" <<'PY'
import sys
from astropy.io import fits
work = sys.argv[1]
for name in ("lc.fits", "fit_residuals.fits"):
    with fits.open(f"{work}/one/{name}") as a, fits.open(f"{work}/two/{name}") as b:
        assert [h.name for h in a] == [h.name for h in b], name
        for ha, hb in zip(a[1:], b[1:]):
            assert ha.data is not None and len(ha.data) > 0 or ha.name == "REJECTS", (name, ha.name)
            if ha.data is None:
                continue
            assert ha.data.tobytes() == hb.data.tobytes(), f"{name} {ha.name} differs"
            print(f"{name} {ha.name}: {len(ha.data)} rows identical")
PY
echo "PASS: two MPI ranks match one process"
