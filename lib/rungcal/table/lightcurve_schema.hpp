// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "rungcal/table/source_table.hpp"

namespace rungcal {

// The light-curve product: the FITS file rungcal-lightcurve writes
// (lightcurve/lightcurve_tables.cpp), with its SUMMARY also as CSV; ingest joins its
// SUMMARY's periods and band means (ingest/lightcurve_join.cpp), and the report draws a
// star's curve from SUMMARY, FOURIER, POINTS and PERIODOGRAM (report/light_curve_figure.cpp).
// Its HDUs and columns are named here once (docs/file-formats.md, "Light-curve summary"); it lives
// in `table` because that is the lowest floor the writer and both readers include. A new column:
// its name below, its add_column and push in the writer, and the file format page.

namespace lightcurve_hdu {
inline constexpr char kSummary[] = "SUMMARY";          // one row per star
inline constexpr char kFourier[] = "FOURIER";          // one row per star, band and harmonic
inline constexpr char kPoints[] = "POINTS";            // one row per epoch (when written)
inline constexpr char kPeriodogram[] = "PERIODOGRAM";  // one row per star and frequency
inline constexpr char kRejects[] = "REJECTS";          // one row per refused input row
}  // namespace lightcurve_hdu

namespace lightcurve_col {
// In every HDU but REJECTS: the star.
inline constexpr char kId[] = "id";
// SUMMARY.
inline constexpr char kPeriodD[] = "period_d";
inline constexpr char kPeriodErrD[] = "period_err_d";
inline constexpr char kLogPeriod[] = "log_period";
inline constexpr char kUsable[] = "usable";
inline constexpr char kFlags[] = "flags";
inline constexpr char kFlagBits[] = "flag_bits";
inline constexpr char kFalseAlarm[] = "false_alarm";
inline constexpr char kPower[] = "power";  // also PERIODOGRAM's
inline constexpr char kSecondPeriodD[] = "second_period_d";
inline constexpr char kSecondPower[] = "second_power";
inline constexpr char kMaxPhaseGap[] = "max_phase_gap";
inline constexpr char kNPoints[] = "n_points";
inline constexpr char kBaselineD[] = "baseline_d";
inline constexpr char kTRef[] = "t_ref";          // also FOURIER's
inline constexpr char kEpochMax[] = "epoch_max";  // also a per-band prefix
inline constexpr char kEpochBand[] = "epoch_band";
inline constexpr char kSkippedBands[] = "skipped_bands";
// SUMMARY's per-band columns are <prefix>_<band> (band_column).
inline constexpr char kMag[] = "mag";         // also POINTS'
inline constexpr char kMagErr[] = "mag_err";  // also POINTS'
inline constexpr char kMagMagavg[] = "mag_magavg";
inline constexpr char kAmplitude[] = "amplitude";
inline constexpr char kOrder[] = "order";
inline constexpr char kN[] = "n";
inline constexpr char kRms[] = "rms";
inline constexpr char kR21[] = "r21";
inline constexpr char kR21Err[] = "r21_err";
inline constexpr char kPhi21[] = "phi21";
inline constexpr char kPhi21Err[] = "phi21_err";
inline constexpr char kR31[] = "r31";
inline constexpr char kR31Err[] = "r31_err";
inline constexpr char kPhi31[] = "phi31";
inline constexpr char kPhi31Err[] = "phi31_err";
// SUMMARY's Gaia epoch counts, per band: flagged_<band>, missing_<band>.
inline constexpr char kFlagged[] = "flagged";
inline constexpr char kMissing[] = "missing";
// FOURIER.
inline constexpr char kBand[] = "band";  // also POINTS'
inline constexpr char kHarmonic[] = "harmonic";
inline constexpr char kCosCoef[] = "cos_coef";
inline constexpr char kSinCoef[] = "sin_coef";
inline constexpr char kFrequency[] = "frequency";  // also PERIODOGRAM's
// POINTS.
inline constexpr char kTime[] = "time";
inline constexpr char kPhase[] = "phase";
inline constexpr char kModelMag[] = "model_mag";
}  // namespace lightcurve_col

// A per-band SUMMARY column: "<prefix>_<band>", e.g. band_column(lightcurve_col::kMag, "V")
// is "mag_V".
std::string band_column(std::string_view prefix, std::string_view band);

// The bands of a SUMMARY: those with a mag_err_<band> column, in column order.
std::vector<std::string> lightcurve_summary_bands(const StarTable& summary);

// The light-curve SUMMARY read from `path`, checked for the columns ingest joins: id,
// period_d, usable. InputError (rule "missing_column") names the file and the first missing.
SourceTable read_lightcurve_summary(const std::string& path);

}  // namespace rungcal
