// SPDX-License-Identifier: MIT
#include "rungcal/table/catalog_schema.hpp"

#include <fmt/format.h>

namespace rungcal {

const std::vector<QuantitySpec>& catalog_quantities() {
  using K = QuantityKind;
  using T = ColumnType;
  static const std::vector<QuantitySpec> kSpecs = {
      {"id", col::kId, T::kText, K::kDimensionless, "star identifier (unique)"},
      {"period", col::kPeriod, T::kReal, K::kPeriod, "pulsation period"},
      {"period_err", col::kPeriodErr, T::kReal, K::kPeriod, "period uncertainty"},
      {"mode", col::kMode, T::kText, K::kDimensionless, "pulsation mode"},
      {"pulsator_class", col::kClass, T::kText, K::kDimensionless, "class of pulsator"},
      {"group", col::kGroup, T::kText, K::kDimensionless, "cluster or host galaxy"},
      {"ra", col::kRa, T::kReal, K::kAngle, "right ascension"},
      {"dec", col::kDec, T::kReal, K::kAngle, "declination"},
      {"parallax", col::kParallax, T::kReal, K::kParallax, "trigonometric parallax as published"},
      {"parallax_err", col::kParallaxErr, T::kReal, K::kParallax, "parallax uncertainty"},
      {"gaia_g", col::kGaiaG, T::kReal, K::kMagnitude, "Gaia G (parallax zero-point input)"},
      {"nu_eff", col::kNuEff, T::kReal, K::kWavenumber,
       "effective wavenumber (5-parameter zero point)"},
      {"pseudocolour", col::kPseudocolour, T::kReal, K::kWavenumber,
       "pseudocolour (6-parameter zero point)"},
      {"ecl_lat", col::kEclLat, T::kReal, K::kAngle, "ecliptic latitude (zero-point input)"},
      {"astrometric_params", col::kAstrometricParams, T::kInteger, K::kDimensionless,
       "astrometric parameters solved (5 or 6; 31/95 bit masks accepted)"},
      {"ruwe", col::kRuwe, T::kReal, K::kDimensionless, "renormalised unit weight error"},
      {"ebv", col::kEbv, T::kReal, K::kMagnitude, "colour excess E(B-V)"},
      {"ebv_err", col::kEbvErr, T::kReal, K::kMagnitude, "E(B-V) uncertainty"},
      {"feh", col::kFeh, T::kReal, K::kDex, "metallicity [Fe/H]"},
      {"feh_err", col::kFehErr, T::kReal, K::kDex, "[Fe/H] uncertainty"},
      {"mu", col::kMu, T::kReal, K::kMagnitude,
       "known distance modulus (non-parallax calibrators)"},
      {"mu_err", col::kMuErr, T::kReal, K::kMagnitude, "distance modulus uncertainty"},
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
  table.set_keyword(key::kSchema, static_cast<std::int64_t>(kCatalogSchemaVersion),
                    "product schema version");
  table.set_keyword(key::kStage, p.stage, "rungcal stage that wrote this");
  table.set_keyword(key::kVersion, p.software_version, "rungcal version");
  table.set_keyword(key::kCommit, p.software_commit, "rungcal git commit");
  table.set_keyword(key::kDate, p.created_utc, "UTC time of writing");
  table.set_keyword(key::kConfigSha, p.config_sha256, "SHA-256 of the config file");
  table.set_keyword(key::kInputCount, static_cast<std::int64_t>(p.inputs.size()),
                    "number of inputs");
  for (std::size_t i = 0; i < p.inputs.size(); ++i) {
    const auto& in = p.inputs[i];
    table.set_keyword(fmt::format("RGINP{:02d}", i + 1), in.path, "input path");
    table.set_keyword(fmt::format("RGSHA{:02d}", i + 1), in.sha256, "input SHA-256");
    table.set_keyword(fmt::format("RGROW{:02d}", i + 1), in.rows, "input data rows");
  }
}

std::string magnitude_column(const std::string& band) { return "mag_" + band; }
std::string magnitude_error_column(const std::string& band) { return "mag_err_" + band; }
std::string dereddened_magnitude_column(const std::string& band) { return "mag0_" + band; }
std::string dereddened_magnitude_error_column(const std::string& band) {
  return "mag0_err_" + band;
}
std::string extinction_column(const std::string& band) { return "a_" + band; }
std::string extinction_error_column(const std::string& band) { return "a_err_" + band; }

}  // namespace rungcal
