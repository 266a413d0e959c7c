// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/calibration/calibration.hpp"
#include "rungcal/calibration/grid_systematics.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

struct ApplyOptions {
  std::string store;             // calibration store
  std::string calibration = "";  // "name@latest" or "name@N"
  std::string relation;          // relation to use (a band or Wesenheit name)
  std::string targets_path;      // dereddened target catalog (HDU CATALOG)
  // rungcal-grid's grid.json, whose budget gives the systematic error; "" = no systematic.
  std::string grid_path;
  // Categories of the budget left out (e.g. "extinction" when its variants' shifts do not
  // apply to these targets: grid_systematics.hpp).
  std::vector<std::string> grid_skip_categories;
  std::string output_path = "out/distances.fits";  // HDUs STARS, HOSTS and HOST_COVARIANCE
  std::string csv_path;         // the stars as CSV ("" = beside the output); other CSVs beside it
  double outlier_sigma = 3.0;   // flagged, left out: |mu - host mean| > this many star sigmas
  int outlier_iterations = 10;  // at most this many flagging passes, each recomputing every flag
  // "" when usable, else "field: rule".
  std::string check() const;
};

// A target Cepheid's distance.
struct TargetDistance {
  std::string id, host;
  std::size_t row = 0;  // 1-based row of the target catalog
  double log_period = 0, m0 = 0, abs_mag = 0;
  double mu = 0;
  double stat_error = 0;  // photometry and intrinsic scatter: independent star to star
  // sqrt(g^T C g), C with every prior (parameter_covariance): shared by all stars.
  double calibration_error = 0;
  double systematic_error = 0;  // from the grid's budget (grid_systematics.hpp); 0 without one
  double distance_pc = 0, distance_err_pc = 0;  // from mu and the three errors in quadrature
  bool outlier = false;          // recomputed on every pass and every run, never carried over
  std::vector<double> gradient;  // dM / d(parameter), parameter_names order
};

// A host galaxy's distance modulus from its Cepheids (apply_calibration):
// - mu: the inverse-variance mean of the stars not flagged, w_i = 1 / stat_error_i^2;
// - stat_error_raw = 1 / sqrt(sum w); chi2 = sum w (mu_i - mu)^2 with dof = n_used - 1;
// - error_scale S = max(1, sqrt(chi2 / dof)) (1 when dof = 0) and stat_error = S
//   stat_error_raw: the scatter of the stars about the mean, when larger than their errors
//   allow, is taken as unmodelled error common to them all (the Birge ratio, Birge 1932,
//   Phys. Rev. 40, 207 (memory); the scale factor of the Particle Data Group's averages,
//   Review of Particle Physics, Introduction: S = sqrt(chi2 / (N - 1)), applied when S > 1).
//   The raw figures stay in the result and the products;
// - calibration_error = sqrt(gbar^T C gbar), gbar = sum w_i g_i / sum w_i the weighted-mean
//   gradient: common to every star of the host and every host, so never averaged down;
// - systematic_error = sqrt(sum_v delta_v^2), delta_v = -gbar . Delta theta_v, from the
//   grid's budget (grid_systematics.hpp).
struct HostDistance {
  std::string host;
  int n_stars = 0, n_outliers = 0;
  double mu = 0;
  double stat_error = 0;      // S * stat_error_raw
  double stat_error_raw = 0;  // 1 / sqrt(sum w)
  double chi2 = 0;            // of the stars used about mu
  int dof = 0;                // stars used - 1
  double error_scale = 1;     // S
  double calibration_error = 0, systematic_error = 0;
  double dispersion = 0;  // sample standard deviation of the stars used about mu
  double distance_mpc = 0, distance_err_mpc = 0;  // from mu and total_error()
  std::vector<double> gradient;                   // gbar
  std::vector<double> systematic_shifts;          // delta_v per grid variant (mag)
  // chi2 / dof, NaN when dof = 0.
  double chi2_per_dof() const;
  // The three errors in quadrature (mag).
  double total_error() const;
};

struct ApplyResult {
  std::string calibration_label;
  ParameterCovariance covariance;  // C of the relation, with every prior
  SystematicShifts systematics;    // empty without a grid
  std::vector<TargetDistance> stars;
  std::vector<HostDistance> hosts;  // in host-name order
};

// mu = m0 - M(log P[, Fe/H]); targets need id, log_period, mag0_<relation> and its error,
// group (host; "" = one unnamed host), feh when the relation has a metallicity term. A row
// without the magnitude is left out; a row with it and a non-finite log_period ("bad_value"),
// an error that is not finite and positive ("bad_error"), no [Fe/H] where the relation needs
// it ("missing_value") or an id seen before ("duplicate_id") is bad input: InputError naming
// the file (options.targets_path), row and column. `systematics` may be empty (no grid).
ApplyResult apply_calibration(const Calibration& calibration, const std::string& relation,
                              const StarTable& targets, const ApplyOptions& options,
                              const SystematicShifts& systematics = {});

}  // namespace rungcal
