#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Parallel efficiency of rungcal-lightcurve over local MPI ranks: the same simulated light
# curves (bench_lightcurve's 300-epoch stars) analysed by one process on one thread and by
# N ranks on one thread each; efficiency = T(1) / (N * T(N)) (target >= 0.8). The summaries
# must be identical. Usage: bench/mpi_lightcurve.sh [build-dir] [stars] [ranks]
set -euo pipefail
build=${1:-build}
stars=${2:-1200}
ranks=${3:-2}
src=$(cd "$(dirname "$0")/.." && pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$build/bench/bench_lightcurve" "$stars" "$work/raw.csv" > /dev/null
{ echo "star,time,mag,mag_err,band"; sed 's/$/,V/' "$work/raw.csv"; } > "$work/curves.csv"
cat > "$work/lc.toml" <<TOML
bands_file = "$src/config/bands.toml"
[source]
path = "$work/curves.csv"
delimiter = "comma"
time_scale = "bjd_tdb"
[columns]
star = "star"
time = "time"
band = "band"
mag = "mag"
mag_err = "mag_err"
[search]
min_period = 1.0
max_period = 100.0
[output]
points = false
TOML
mpi=(mpirun -n "$ranks" --oversubscribe)
[ "$(id -u)" = 0 ] && mpi+=(--allow-run-as-root)
# Open MPI on one machine: shared memory only, without probing the network layers at
# start-up (0.25 s saved per launch here; docs/operations.md).
mpirun --version 2>&1 | grep -q "Open MPI" && mpi+=(--mca pml ob1 --mca btl self,vader)
seconds() { local t0 t1; t0=$(date +%s.%N); "$@" > /dev/null; t1=$(date +%s.%N); echo "$t1 - $t0" | bc -l; }
t1=$(seconds "$build/bin/rungcal-lightcurve" -q --config "$work/lc.toml" --threads 1 --out "$work/one.fits")
tn=$(seconds "${mpi[@]}" "$build/bin/rungcal-lightcurve" -q --config "$work/lc.toml" --threads 1 --out "$work/n.fits")
if diff <(grep -v '^# DATE' "$work/one.csv") <(grep -v '^# DATE' "$work/n.csv") > /dev/null; then
  same=identical
else
  same=DIFFERENT
fi
printf '%d stars, 300 epochs, periods 1-100 d; summaries %s\n' "$stars" "$same"
printf 'one process, 1 thread: %6.2f s\n' "$t1"
printf '%d ranks, 1 thread each: %6.2f s  (mpirun start-up included)\n' "$ranks" "$tn"
printf 'parallel efficiency %.2f (target >= 0.80)\n' "$(echo "$t1 / ($ranks * $tn)" | bc -l)"
