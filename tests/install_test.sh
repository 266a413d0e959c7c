#!/usr/bin/env bash
# SPDX-License-Identifier: MIT
# Installs rungcal into a temporary prefix, builds tests/consumer against the installed
# package, and checks that it reads a published calibration as the library does.
# Usage: install_test.sh SOURCE_DIR BUILD_DIR
set -euo pipefail
src=$1 build=$2
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cmake --install "$build" --prefix "$work/prefix" >/dev/null
# Only public headers: none of a module's inside, and none including a header left out.
inc="$work/prefix/include"
if find "$inc" -name '*_parts.hpp' -o -name stage_main.hpp | grep .; then
  echo "internal headers installed" >&2; exit 1
fi
missing=$(grep -rhoE '#include "rungcal/[^"]+"' "$inc" | sed -E 's/.*"(.*)"/\1/' | sort -u |
          while read -r h; do [ -f "$inc/$h" ] || echo "$h"; done)
if [ -n "$missing" ]; then
  echo "installed headers include headers not installed: $missing" >&2; exit 1
fi
if ! cmp -s "$src/config/bands.toml" "$work/prefix/share/rungcal/bands.toml"; then
  echo "the band table is not installed as share/rungcal/bands.toml" >&2; exit 1
fi
if grep -rq --include="*.cmake" CLI11 "$work/prefix"; then
  echo "the installed package depends on CLI11" >&2; exit 1
fi
cmake -S "$src/tests/consumer" -B "$work/consumer" -DCMAKE_PREFIX_PATH="$work/prefix" >/dev/null
cmake --build "$work/consumer" -j2 >/dev/null
"$build/bin/rungcal-ingest" --config "$src/config/reference/mw_cepheids_hst_gaiadr2.toml" --out "$work/cat.fits"
sed -e "s#../../out/reference/mw_cepheids_catalog.fits#$work/cat.fits#" \
    -e "s#../../out/reference/mw_cepheids_fit.json#$work/fit.json#" \
    "$src/config/reference/fit_mw_cepheids_dr2.toml" > "$work/fit.toml"
"$build/bin/rungcal-fit" --config "$work/fit.toml" >/dev/null
"$build/bin/rungcal-publish" --store "$work/store" --name mw --fit "$work/fit.json" >/dev/null
out=$("$work/consumer/consumer" "$work/store" mw@latest W_H 1.0)
echo "consumer: $out"
case "$out" in
  "mw@1 -5.910"*) echo "installed package works" ;;
  *) echo "unexpected output from the consumer: $out" >&2; exit 1 ;;
esac
