// SPDX-License-Identifier: MIT
#pragma once

namespace rungcal {

// The fit's residuals: the FITS file rungcal-fit writes beside its result
// (plfit/fit_stage.cpp, plfit/fit_bootstrap.cpp) and publish keeps with each calibration
// version; the report's figures, star tables and status page read its RESIDUALS
// (report/figures.cpp, report/tables.cpp, report/site.cpp). Its file name, HDUs and columns
// are named here once (docs/file-formats.md, "Fit residuals"); it lives in `table` because
// that is the lowest floor the writer and the readers include. A new column: its name below,
// its add_column and push in the writer, and the file format page.

// The name publish gives the file in a version's folder, and rungcal-run in its run folder.
inline constexpr char kFitResidualsFileName[] = "fit_residuals.fits";

namespace residuals_hdu {
inline constexpr char kResiduals[] = "RESIDUALS";  // one row per star and relation
inline constexpr char kBootstrap[] = "BOOTSTRAP";  // one row per resample and parameter
}  // namespace residuals_hdu

namespace residual_col {
// RESIDUALS.
inline constexpr char kRelation[] = "relation";  // the relation's name (also BOOTSTRAP's)
inline constexpr char kId[] = "id";
inline constexpr char kKind[] = "kind";      // kCalibratorKindNames; null when refused early
inline constexpr char kReason[] = "reason";  // why a star was refused; null when used
inline constexpr char kUsed[] = "used";
inline constexpr char kLogPeriodF[] = "log_period_f";
inline constexpr char kM0[] = "m0";
inline constexpr char kM0Err[] = "m0_err";
inline constexpr char kAbsMagModel[] = "abs_mag_model";
inline constexpr char kResidual[] = "residual";
inline constexpr char kParallaxCorrectedMas[] = "parallax_corrected_mas";
inline constexpr char kParallaxErrMas[] = "parallax_err_mas";
inline constexpr char kPredicted[] = "predicted";
inline constexpr char kFeh[] = "feh";
inline constexpr char kGaiaGMag[] = "gaia_g_mag";
inline constexpr char kMembership[] = "membership";
// BOOTSTRAP.
inline constexpr char kResample[] = "resample";
inline constexpr char kParameter[] = "parameter";
inline constexpr char kValue[] = "value";
}  // namespace residual_col

}  // namespace rungcal
