// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "rungcal/core/provenance.hpp"
#include "rungcal/lightcurve/per_star_files.hpp"
#include "rungcal/table/source_table.hpp"
#include "rungcal/table/table_source.hpp"

namespace rungcal {

// Gaia DR3 epoch photometry as the archive publishes it, in either of its two forms
// (Gaia DR3 documentation, section 20.7.1 "epoch_photometry"):
// - arrays ("RAW"): one row per source, the epochs in array columns (the same columns in
//   the bulk ECSV files);
// - flat ("INDIVIDUAL", as the DataLink service writes it in CSV, VOTable or FITS): one
//   epoch per row, columns source_id, band (G, BP, RP), time, mag, flux, flux_error,
//   flux_over_error, rejected_by_photometry, rejected_by_variability (table 1 of the Gaia
//   DR3 paper on the epoch photometry, A&A 2023, article aa44204-22).
// [source] layout = "gaia_epoch" reads both, telling them apart by the file's columns (a
// file without arrays and with a time or band column is flat), and makes one light curve
// per source and band G, BP and RP by the same rules.

// Gaia's epoch times are "Barycentric JD in TCB - 2455197.5 (day)", the origin being
// 2010-01-01T00:00:00 TCB (Gaia DR3 documentation, section 20.7.1, g_transit_time,
// bp_obs_time, rp_obs_time; the same in Gaia DR3 documentation section 10.2.3). So
// BJD(TCB) = t + 2455197.5; the stage keeps the TCB scale (time_scale "bjd_tcb"): TCB runs
// ahead of TDB by about 19 s over the DR3 epochs, which no period or phase here can feel.
inline constexpr double kGaiaTimeOriginBjd = 2455197.5;
double bjd_from_gaia_time(double gaia_time_d);

// Vega-system photometric zero points of Gaia (E)DR3, for G = -2.5 log10(flux) + ZP with the
// flux in e-/s: G 25.6874, BP 25.3385, RP 24.7479 (Riello et al. 2021, A&A 649, A3,
// section 7, table 3). Recalled from memory; the table itself was not read. The values agree
// with an independent listing of the Gaia DR3 Vega zero points, and ESA's Gaia EDR3
// known-issues page names Riello et al., section 7, table 3 as where they are published.
// A real DataLink file (tests/data/gaia_dr3_epoch_photometry) confirms them: with these, its
// own fluxes give its own magnitudes to 4e-5 mag in each band (lightcurve_real_data_test).
// The zero points' own errors (a few mmag, memory) shift every epoch alike and are left out
// of the epoch errors: they cannot move a period, a phase or an amplitude.
inline constexpr double kGaiaZeroPointG = 25.6874;
inline constexpr double kGaiaZeroPointBp = 25.3385;
inline constexpr double kGaiaZeroPointRp = 24.7479;

// m = ZP - 2.5 log10(flux); NaN for a flux that is not positive.
double magnitude_from_flux(double flux, double zero_point);
// sigma_m = (2.5 / ln 10) / (flux / sigma_flux): first-order propagation of the flux error
// through m = ZP - 2.5 log10(flux) (common practice); NaN for a ratio that is not positive.
double magnitude_error_from_flux_over_error(double flux_over_error);

// One band's array columns (names as in Gaia DR3 documentation, section 20.7.1).
struct GaiaEpochBand {
  const char* band;                // band name in the band table
  const char* time;                // epoch times
  const char* mag;                 // Vega magnitudes (used when present)
  const char* flux;                // fluxes, e-/s (when there is no magnitude column)
  const char* flux_over_error;     // flux divided by its error
  const char* flux_error;          // the flux error (when there is no flux_over_error column)
  const char* variability_reject;  // "rejected by variability processing"
  const char* photometry_reject;   // "transit rejected by photometry processing" (BP, RP)
  double zero_point;
};
extern const GaiaEpochBand kGaiaEpochBands[3];

// The files [source] path names: the file itself, or every file a glob matches (one
// archive download per source); InputError "no_files" when none.
std::vector<std::string> gaia_epoch_files(const std::string& path);

// Every array column the layout may use, to ask the readers for.
std::vector<std::string> gaia_epoch_array_columns();

// What the expansion dropped from one band of one source: epochs with a rejection flag set
// (variability_flag_<band>_reject, photometry_flag_<band>_reject, and per-transit
// rejected_by_variability / rejected_by_photometry arrays when a file has them) and epochs
// with a NaN or null time, magnitude, flux or error, or a flux that is not positive.
struct GaiaDroppedEpochs {
  std::string star, band;
  std::int64_t source_row = 0;  // the source's (first) row (FITS, binary VOTable) or line
                                // (TABLEDATA VOTable, ECSV, CSV)
  std::int64_t flagged = 0;
  std::int64_t missing = 0;
};

// Reads every file the spec's path (a file name or a glob) matches, in either form, and
// writes one long table of columns.star (source_id), band, time (BJD TCB), mag and err, its
// source rows the row (FITS, BINARY and BINARY2 VOTable) or line (TABLEDATA VOTable, ECSV,
// CSV) of each source (arrays) or epoch (flat). bands: the bands to expand ("G", "BP", "RP"); a
// flat file's rows of other bands are skipped. inputs receives every file with its SHA-256 and
// rows. Throws InputError naming the file, row and column: "missing_column" (no source_id; arrays:
// a band without its time array or without magnitudes or fluxes and their errors; flat: no band or
// time column, no mag or flux, no flux_over_error or flux_error), "not_an_array" (the column is
// there but holds one value per row), "array_length" (a row whose arrays for one band
// differ in length); flat only: "unknown_band" (a band value other than G, BP, RP),
// "not_a_number" (a value that is neither empty nor a number), "not_a_flag" (a rejection
// flag other than True/False, T/F, 1/0), "missing_required" (a row without source_id).
SourceTable read_gaia_epochs(const TableSourceSpec& spec, const std::vector<std::string>& bands,
                             const LightCurveColumns& columns, std::vector<InputRecord>& inputs,
                             std::vector<GaiaDroppedEpochs>& dropped);

}  // namespace rungcal
