#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Builds the libFuzzer targets (fuzz/, clang with ASan + UBSan) and runs each for SECONDS on
# a corpus seeded from the test inputs (sample data, the published reference tables, the
# configs). The corpus grows in BUILD/corpus/ from run to run; findings (crash-*, leak-*,
# timeout-*, oom-*) land in BUILD/findings/<target>/ and make the script exit 1.
#   scripts/fuzz.sh                      # 60 s per target
#   scripts/fuzz.sh --seconds 3600       # an hour per target (DEVELOPERS.md)
#   scripts/fuzz.sh --runs 300 --seed 1  # a fixed number of inputs from a fixed seed:
#                                        # the same run every time (the test suite's smoke run)
set -euo pipefail
cd "$(dirname "$0")/.."
seconds=60
runs=0
seed=0
build=build-fuzz
while [ $# -gt 0 ]; do
  case "$1" in
    --seconds) seconds=$2; shift 2 ;;
    --build) build=$2; shift 2 ;;
    --runs) runs=$2; shift 2 ;;
    --seed) seed=$2; shift 2 ;;
    *) echo "fuzz.sh: unknown option $1 (--seconds N, --runs N, --seed N, --build DIR)" >&2; exit 2 ;;
  esac
done
cmake -S . -B "$build" -DCMAKE_CXX_COMPILER=clang++ -DCMAKE_BUILD_TYPE=RelWithDebInfo -DRUNGCAL_FUZZ=ON \
  -DRUNGCAL_WERROR=OFF >/dev/null
cmake --build "$build" -j"$(nproc)" >/dev/null

# Seeds. The text target's first byte picks the reader's options (0: comma with header,
# 4: whitespace, 5: multi-space), so each file is seeded under the options it is read with.
seeds="$build/seeds"
rm -rf "$seeds"
mkdir -p "$seeds/fuzz_text_table" "$seeds/fuzz_ecsv_table" "$seeds/fuzz_votable_table" "$seeds/fuzz_votable_binary" \
  "$seeds/fuzz_gaia_epoch" "$seeds/fuzz_fits_table" "$seeds/fuzz_config"
n=0
for f in sample_data/*.csv ../shared/reference/*.csv ../shared/reference/*.txt tests/*.csv; do
  [ -f "$f" ] || continue
  for opt in '\x00' '\x04' '\x05'; do
    n=$((n + 1))
    { printf "$opt"; head -c 60000 "$f"; } > "$seeds/fuzz_text_table/seed$n"
  done
done
cp sample_data/*.fits "$seeds/fuzz_fits_table/"
# Array columns, variable-length and fixed vectors, as Gaia epoch photometry has them
# (fuzz/seeds/fits: invented sources, written by astropy).
cp fuzz/seeds/fits/*.fits "$seeds/fuzz_fits_table/"
# An ECSV table as astropy writes it (invented stars).
printf '%s\n' '# %ECSV 1.0' '# ---' '# datatype:' '# - {name: id, datatype: string}' \
  '# - {name: plx, unit: mas, datatype: float64}' '# - {name: n, datatype: int64}' \
  '# - {name: ok, datatype: bool}' '# meta: !!omap' '# - {observatory: Mount Vellin}' \
  '# schema: astropy-2.0' 'id plx n ok' '"Vell 1" 0.5 3 True' 'Vell-2 nan "" False' \
  > "$seeds/fuzz_ecsv_table/seed1"
printf '%s\n' '<?xml version="1.0"?>' '<VOTABLE version="1.4"><RESOURCE><TABLE>' \
  '<FIELD name="id" datatype="char" arraysize="*"/><FIELD name="plx" datatype="double" unit="mas"/>' \
  '<FIELD name="n" datatype="int"><VALUES null="-1"/></FIELD><FIELD name="ok" datatype="boolean"/>' \
  '<DATA><TABLEDATA><TR><TD>Vell 1</TD><TD>0.5</TD><TD>3</TD><TD>T</TD></TR>' \
  '<TR><TD>Vell-2</TD><TD>NaN</TD><TD>-1</TD><TD/></TR></TABLEDATA></DATA></TABLE></RESOURCE></VOTABLE>' \
  > "$seeds/fuzz_votable_table/seed1"
# Array columns as Gaia epoch photometry has them (invented source ids).
printf '%s\n' '# %ECSV 1.0' '# ---' '# datatype:' '# - {name: source_id, datatype: int64}' \
  "# - {name: g_transit_time, datatype: string, subtype: 'float64[null]'}" \
  "# - {name: variability_flag_g_reject, datatype: string, subtype: 'bool[null]'}" \
  'source_id g_transit_time variability_flag_g_reject' '17 [1706.5,null,NaN] [false,true,false]' \
  '18 [] []' > "$seeds/fuzz_ecsv_table/seed2"
printf '%s\n' '<?xml version="1.0"?>' '<VOTABLE version="1.4"><RESOURCE><TABLE>' \
  '<FIELD name="source_id" datatype="long"/><FIELD name="t" datatype="double" arraysize="*"/>' \
  '<FIELD name="rej" datatype="bit" arraysize="*"/><FIELD name="n" datatype="int" arraysize="3"><VALUES null="-1"/></FIELD>' \
  '<DATA><TABLEDATA><TR><TD>17</TD><TD>1706.5 NaN 1710.25</TD><TD>010</TD><TD>1 -1 3</TD></TR>' \
  '<TR><TD>18</TD><TD/><TD>1 0</TD><TD>4 5 6</TD></TR></TABLEDATA></DATA></TABLE></RESOURCE></VOTABLE>' \
  > "$seeds/fuzz_votable_table/seed2"
# A BINARY2 VOTable of Gaia-epoch-like arrays, and decoded binary streams, a first byte
# choosing the serialization and the FIELDs (fuzz/seeds/votable/write_binary_seeds.py).
cp fuzz/seeds/votable/*.vot "$seeds/fuzz_votable_table/"
cp fuzz/seeds/votable_binary/*.bin "$seeds/fuzz_votable_binary/"
# The gaia_epoch layout: a first byte choosing the reader (0: VOTable, 1: ECSV), then the
# VOTable and ECSV epoch seeds above.
for f in fuzz/seeds/votable/*.vot "$seeds/fuzz_votable_table/seed2"; do
  { printf '\x00'; cat "$f"; } > "$seeds/fuzz_gaia_epoch/vot-$(basename "$f")"
done
{ printf '\x01'; cat "$seeds/fuzz_ecsv_table/seed2"; } > "$seeds/fuzz_gaia_epoch/ecsv-seed2"
find config -name '*.toml' -exec cp {} "$seeds/fuzz_config/" \;

status=0
for target in fuzz_text_table fuzz_ecsv_table fuzz_votable_table fuzz_votable_binary fuzz_gaia_epoch fuzz_fits_table \
  fuzz_config; do
  corpus="$build/corpus/$target"
  findings="$build/findings/$target"
  mkdir -p "$corpus" "$findings"
  echo "== $target: $seconds s"
  extra=()
  [ "$runs" -gt 0 ] && extra+=(-runs="$runs")
  [ "$seed" -gt 0 ] && extra+=(-seed="$seed")
  if ! "$build/fuzz/$target" "${extra[@]}" -max_total_time="$seconds" -max_len=65536 -timeout=10 -rss_limit_mb=4096 \
       -artifact_prefix="$findings/" -print_final_stats=1 "$corpus" "$seeds/$target" > "$build/$target.log" 2>&1; then
    echo "$target: FOUND A PROBLEM (see $build/$target.log and $findings/)"
    status=1
  fi
  grep -E "^stat::number_of_executed_units|^stat::peak_rss_mb|^#[0-9]+.*DONE" "$build/$target.log" | tail -3 || true
done
exit $status
