// SPDX-License-Identifier: MIT
#include <string_view>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest_parts.hpp"

namespace rungcal::ingest_parts {
namespace {

struct PresetColumn {
  std::string_view key;     // [columns] key
  std::string_view column;  // the archive's column name
};

// The Gaia DR3 gaia_source names (Gaia DR3 documentation, chapter 20, "gaia_source"). The
// units come from the file (the archive writes mas, deg, mag and um**-1); Gaia's
// astrometric_params_solved bit masks 31 and 95 become 5 and 6 parameters in the row checks.
constexpr PresetColumn kGaiaDr3[] = {
    {"id", "source_id"},
    {"ra", "ra"},
    {"dec", "dec"},
    {"parallax", "parallax"},
    {"parallax_err", "parallax_error"},
    {"gaia_g", "phot_g_mean_mag"},
    {"nu_eff", "nu_eff_used_in_astrometry"},
    {"pseudocolour", "pseudocolour"},
    {"ecl_lat", "ecl_lat"},
    {"astrometric_params", "astrometric_params_solved"},
    {"ruwe", "ruwe"},
};

}  // namespace

IngestOptions with_preset_columns(const IngestOptions& o, const StarTable& input) {
  if (o.column_preset == ColumnPreset::kNone) return o;
  IngestOptions out = o;
  for (const PresetColumn& p : kGaiaDr3) {
    const std::string key(p.key), column(p.column);
    if (out.quantities.count(key) || !input.has(column)) continue;
    ValueSource v;
    v.column = column;
    out.quantities[key] = v;
  }
  if (!out.quantities.count("id"))
    throw InputError({o.input_path, {}, "source_id"}, "missing_column",
                     fmt::format("[columns] preset = \"{}\" takes the star id from source_id, "
                                 "which the file does not have: map id in [columns]",
                                 kColumnPresetNames.name(o.column_preset)));
  return out;
}

bool ecl_lat_from_ra_dec(const IngestOptions& o) {
  return o.column_preset == ColumnPreset::kGaiaDr3 && !o.quantities.count("ecl_lat") &&
         o.quantities.count("ra") && o.quantities.count("dec");
}

}  // namespace rungcal::ingest_parts
