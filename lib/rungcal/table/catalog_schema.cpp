// SPDX-License-Identifier: MIT
#include "rungcal/table/catalog_schema.hpp"

#include <fmt/format.h>

namespace rungcal {

const std::vector<QuantitySpec>& catalog_quantities() {
  using K = QuantityKind;
  using T = ColumnType;
  static const std::vector<QuantitySpec> kSpecs = {
      {"id", "id", T::kText, K::kDimensionless, "star identifier (unique)"},
      {"period", "period_d", T::kReal, K::kPeriod, "pulsation period"},
      {"period_err", "period_err_d", T::kReal, K::kPeriod, "period uncertainty"},
      {"mode", "mode", T::kText, K::kDimensionless, "pulsation mode"},
      {"pulsator_class", "pulsator_class", T::kText, K::kDimensionless, "class of pulsator"},
      {"group", "group", T::kText, K::kDimensionless, "cluster or host galaxy"},
      {"ra", "ra_deg", T::kReal, K::kAngle, "right ascension"},
      {"dec", "dec_deg", T::kReal, K::kAngle, "declination"},
      {"parallax", "parallax_mas", T::kReal, K::kParallax, "trigonometric parallax as published"},
      {"parallax_err", "parallax_err_mas", T::kReal, K::kParallax, "parallax uncertainty"},
      {"gaia_g", "gaia_g_mag", T::kReal, K::kMagnitude, "Gaia G (parallax zero-point input)"},
      {"nu_eff", "nu_eff_um", T::kReal, K::kWavenumber, "effective wavenumber (5-parameter zero point)"},
      {"pseudocolour", "pseudocolour_um", T::kReal, K::kWavenumber, "pseudocolour (6-parameter zero point)"},
      {"ecl_lat", "ecl_lat_deg", T::kReal, K::kAngle, "ecliptic latitude (zero-point input)"},
      {"astrometric_params", "astrometric_params", T::kInteger, K::kDimensionless, "astrometric parameters solved (5 or 6; 31/95 bit masks accepted)"},
      {"ruwe", "ruwe", T::kReal, K::kDimensionless, "renormalised unit weight error"},
      {"ebv", "ebv", T::kReal, K::kMagnitude, "colour excess E(B-V)"},
      {"ebv_err", "ebv_err", T::kReal, K::kMagnitude, "E(B-V) uncertainty"},
      {"feh", "feh", T::kReal, K::kDex, "metallicity [Fe/H]"},
      {"feh_err", "feh_err", T::kReal, K::kDex, "[Fe/H] uncertainty"},
      {"mu", "mu_mag", T::kReal, K::kMagnitude, "known distance modulus (non-parallax calibrators)"},
      {"mu_err", "mu_err_mag", T::kReal, K::kMagnitude, "distance modulus uncertainty"},
  };
  return kSpecs;
}

const QuantitySpec* find_quantity(std::string_view key) {
  for (const auto& s : catalog_quantities())
    if (s.key == key) return &s;
  return nullptr;
}

void stamp_provenance(StarTable& table, const Provenance& p, const std::string& product) {
  table.set_keyword(key::kProduct, product, "rungcal product type");
  table.set_keyword(key::kSchema, static_cast<std::int64_t>(kCatalogSchemaVersion), "product schema version");
  table.set_keyword(key::kStage, p.stage, "rungcal stage that wrote this");
  table.set_keyword(key::kVersion, p.software_version, "rungcal version");
  table.set_keyword(key::kCommit, p.software_commit, "rungcal git commit");
  table.set_keyword(key::kDate, p.created_utc, "UTC time of writing");
  table.set_keyword(key::kConfigSha, p.config_sha256, "SHA-256 of the config file");
  table.set_keyword(key::kInputCount, static_cast<std::int64_t>(p.inputs.size()), "number of inputs");
  for (std::size_t i = 0; i < p.inputs.size(); ++i) {
    const auto& in = p.inputs[i];
    table.set_keyword(fmt::format("RGINP{:02d}", i + 1), in.path, "input path");
    table.set_keyword(fmt::format("RGSHA{:02d}", i + 1), in.sha256, "input SHA-256");
    table.set_keyword(fmt::format("RGROW{:02d}", i + 1), in.rows, "input data rows");
  }
}

std::string magnitude_column(const std::string& band) { return "mag_" + band; }
std::string magnitude_error_column(const std::string& band) { return "mag_err_" + band; }

}  // namespace rungcal
