// SPDX-License-Identifier: MIT
#pragma once

#include <map>
#include <optional>
#include <string>
#include <vector>

#include "rungcal/core/config.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/stage_files.hpp"
#include "rungcal/extinction/extinction.hpp"
#include "rungcal/photometry/bands.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// Where a Wesenheit coefficient R comes from.
enum class WesenheitSource {
  kTable,  // the band table's r where given, else the law
  kLaw,    // always R_X / (R_Y - R_Z) from the chosen law (reddening-free for that law)
};
inline constexpr EnumTable<WesenheitSource, 2> kWesenheitSourceNames{{{
    {WesenheitSource::kTable, "table"},
    {WesenheitSource::kLaw, "law"},
}}};

struct DereddenOptions {
  std::string input_path;  // catalog from rungcal-ingest (HDU CATALOG)
  std::string output_path = "out/catalog_dereddened.fits";  // this stage's product
  std::string bands_file;                                   // band table (config/bands.toml)
  ExtinctionLaw law = ExtinctionLaw::kF99;                  // law for band coefficients
  double r_v = 3.1;                                         // A_V / E(B-V)
  std::vector<std::string> bands;      // bands to deredden; empty = every catalog band in the table
  bool bands_given = false;            // the config lists bands (an empty list: no band at all)
  std::vector<std::string> wesenheit;  // Wesenheit magnitudes to form (names in the band table)
  WesenheitSource wesenheit_source = WesenheitSource::kTable;
  std::map<std::string, double> a_over_ebv;  // per-band A/E(B-V) overriding law and table
  std::string config_sha256;                 // for provenance

  // "" when usable, else "field: rule".
  std::string check() const;
};

// Reads a [deredden] config; unknown keys stop with rule "unknown_config_key".
DereddenOptions deredden_options_from_file(const std::string& path);

// What the stage reads (the catalog and the band table) and writes (the dereddened catalog).
StageFiles declared_files(const DereddenOptions& options);

// The coefficient used for one output magnitude.
struct BandCoefficient {
  std::string name;  // band or Wesenheit name
  bool wesenheit = false;
  double a_over_ebv = 0;  // R_band for a band; for a Wesenheit the residual R_X - R (R_Y - R_Z)
  double r = 0;           // Wesenheit coefficient (0 for bands)
  double wavelength_aa = 0;
  std::string x, y, z;  // Wesenheit bands
};

struct DereddenResult {
  StarTable catalog;  // input columns plus mag0_*, mag0_err_*, a_*, a_err_*
  std::vector<BandCoefficient> coefficients;
  StarTable coefficients_table() const;  // HDU COEFFS: what the fit needs for covariances
  std::size_t stars_without_ebv = 0;
  Provenance provenance;
};

// Which bands are dereddened: those listed (bands or bands_given), else every catalog band
// the band table knows; without a catalog ebv column and with Wesenheit magnitudes asked for,
// none by default (a Wesenheit needs no E(B-V); a listed band still stops with
// missing_column).
// Dereddens each band: m0 = m - R E(B-V), sigma0^2 = sigma^2 + (R sigma_E)^2, A = R E(B-V);
// the per-star covariance of two dereddened bands is R_X R_Y sigma_E^2 (one E(B-V)), kept in
// COEFFS for the fit. Wesenheit: W = m_X - R (m_Y - m_Z), its error from the three
// magnitudes' errors (each band's total coefficient, so W_VI = (1+R) I - R V is right).
DereddenResult run_deredden(const DereddenOptions& options, const StarTable& catalog,
                            const BandTable& bands);
// Reads the input, runs, writes (HDUs CATALOG and COEFFS), atomically.
DereddenResult deredden_catalog_file(const DereddenOptions& options);

}  // namespace rungcal
