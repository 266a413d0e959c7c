// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "rungcal/core/enum_table.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/table/star_table.hpp"
#include "rungcal/table/units.hpp"

namespace rungcal {

// Schema version of the catalog product (docs/file-formats.md); bump on any change that an
// older reader would misread.
inline constexpr int kCatalogSchemaVersion = 1;

// Pulsation mode of a star. Periods of overtone pulsators are fundamentalized by the fit
// stage when a relation asks for it.
enum class PulsationMode { kFundamental, kFirstOvertone, kSecondOvertone, kDoubleMode };
inline constexpr EnumTable<PulsationMode, 4> kPulsationModeNames{{{
    {PulsationMode::kFundamental, "fundamental"},
    {PulsationMode::kFirstOvertone, "first_overtone"},
    {PulsationMode::kSecondOvertone, "second_overtone"},
    {PulsationMode::kDoubleMode, "double_mode"},
}}};

enum class PulsatorClass { kClassicalCepheid, kType2Cepheid, kAnomalousCepheid, kRRLyrae, kOther };
inline constexpr EnumTable<PulsatorClass, 5> kPulsatorClassNames{{{
    {PulsatorClass::kClassicalCepheid, "classical_cepheid"},
    {PulsatorClass::kType2Cepheid, "type2_cepheid"},
    {PulsatorClass::kAnomalousCepheid, "anomalous_cepheid"},
    {PulsatorClass::kRRLyrae, "rr_lyrae"},
    {PulsatorClass::kOther, "other"},
}}};

// A canonical per-star quantity: its config key, output column, type, unit kind and meaning.
struct QuantitySpec {
  std::string_view key;     // name in the config's [columns] table
  std::string_view column;  // catalog column name
  ColumnType type;
  QuantityKind kind;
  std::string_view description;
};

// Every canonical quantity except the per-band magnitudes, in catalog column order.
const std::vector<QuantitySpec>& catalog_quantities();
const QuantitySpec* find_quantity(std::string_view key);

// Catalog column names of a band's mean magnitude and its error.
std::string magnitude_column(const std::string& band);
std::string magnitude_error_column(const std::string& band);
// The dereddened catalog's (deredden writes them; fit, grid and apply read them): a band's
// or a Wesenheit's dereddened magnitude mag0_<name> and its error, and a band's extinction
// a_<band> and its error.
std::string dereddened_magnitude_column(const std::string& band);
std::string dereddened_magnitude_error_column(const std::string& band);
std::string extinction_column(const std::string& band);
std::string extinction_error_column(const std::string& band);

// The catalog's column names (ingest writes them, deredden, fit, grid and apply read them;
// catalog_quantities() names each quantity's by these).
namespace col {
inline constexpr const char* kId = "id";
inline constexpr const char* kPeriod = "period_d";
inline constexpr const char* kPeriodErr = "period_err_d";
inline constexpr const char* kPeriodOrigin =
    "period_origin";  // catalog or lightcurve (a light-curve join)
inline constexpr const char* kLogPeriod = "log_period";
inline constexpr const char* kMode = "mode";
inline constexpr const char* kClass = "pulsator_class";
inline constexpr const char* kRa = "ra_deg";
inline constexpr const char* kDec = "dec_deg";
inline constexpr const char* kParallax = "parallax_mas";
inline constexpr const char* kParallaxErr = "parallax_err_mas";
inline constexpr const char* kGaiaG = "gaia_g_mag";
inline constexpr const char* kNuEff = "nu_eff_um";
inline constexpr const char* kPseudocolour = "pseudocolour_um";
inline constexpr const char* kEclLat = "ecl_lat_deg";
inline constexpr const char* kAstrometricParams = "astrometric_params";
inline constexpr const char* kRuwe = "ruwe";
inline constexpr const char* kEbv = "ebv";
inline constexpr const char* kEbvErr = "ebv_err";
inline constexpr const char* kFeh = "feh";
inline constexpr const char* kFehErr = "feh_err";
inline constexpr const char* kMu = "mu_mag";
inline constexpr const char* kMuErr = "mu_err_mag";
inline constexpr const char* kGroup = "group";
inline constexpr const char* kSourceRow = "source_row";
}  // namespace col

// The catalog files' HDUs: ingest writes CATALOG and REJECTS, deredden CATALOG and COEFFS.
namespace catalog_hdu {
inline constexpr const char* kCatalog = "CATALOG";
inline constexpr const char* kRejects = "REJECTS";
inline constexpr const char* kCoefficients = "COEFFS";
}  // namespace catalog_hdu

// A REJECTS table's columns (ingest's and rungcal-lightcurve's; the status page reads them).
namespace reject_col {
inline constexpr const char* kSourceRow = "source_row";
inline constexpr const char* kId = "id";
inline constexpr const char* kRule = "rule";
inline constexpr const char* kColumn = "column";
inline constexpr const char* kMessage = "message";
}  // namespace reject_col

// The dereddened catalog's COEFFS columns, one row per band or Wesenheit.
namespace coefficient_col {
inline constexpr const char* kName = "name";
inline constexpr const char* kKind = "kind";
inline constexpr const char* kAOverEbv = "a_over_ebv";
inline constexpr const char* kWesenheitR = "wesenheit_r";
inline constexpr const char* kWavelength = "wavelength_aa";
}  // namespace coefficient_col

// Header keyword names shared by every product (docs/file-formats.md, "Provenance").
namespace key {
inline constexpr const char* kSchema = "RGSCHEMA";
inline constexpr const char* kProduct = "RGPRODUC";
inline constexpr const char* kStage = "RGSTAGE";
inline constexpr const char* kVersion = "RGVERSN";
inline constexpr const char* kCommit = "RGCOMMIT";
inline constexpr const char* kDate = "DATE";
inline constexpr const char* kConfigSha = "RGCFGSHA";
inline constexpr const char* kInputCount = "RGNINPUT";
inline constexpr const char* kBands = "RGBANDS";
}  // namespace key

// Writes the provenance keywords (names above, RGINPnn/RGSHAnn/RGROWnn per input) into a
// product's header.
void stamp_provenance(StarTable& table, const Provenance& p, const std::string& product);

}  // namespace rungcal
