// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/calibration/calibration.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

struct ApplyOptions {
  std::string store;                    // calibration store
  std::string calibration = "";         // "name@latest" or "name@N"
  std::string relation;                 // relation to use (a band or Wesenheit name)
  std::string targets_path;             // dereddened target catalog (HDU CATALOG)
  std::string output_path = "out/distances.fits";  // per star (HDU STARS) and per host (HDU HOSTS)
  std::string csv_path;                 // the same as CSV; "" = beside the output
  double outlier_sigma = 3.0;           // |mu - host mean| above this many sigma: flagged, left out
  int outlier_iterations = 10;
  std::string check() const;
};

// A target Cepheid's distance.
struct TargetDistance {
  std::string id, host;
  double log_period = 0, m0 = 0, abs_mag = 0;
  double mu = 0;
  double stat_error = 0;         // photometry and intrinsic scatter: independent star to star
  double calibration_error = 0;  // from the calibration's covariance: shared by all stars
  double distance_pc = 0, distance_err_pc = 0;  // from mu and the two errors in quadrature
  bool outlier = false;
  std::vector<double> gradient;
};

// A host galaxy's distance modulus from its Cepheids: inverse-variance mean of the stars
// not flagged, its statistical error 1/sqrt(sum w), the stars' dispersion about it, and the
// calibration systematic sqrt(g^T C g) with g the weighted-mean gradient, kept apart
// because it is common to every star of the host (and of every host).
struct HostDistance {
  std::string host;
  int n_stars = 0, n_outliers = 0;
  double mu = 0, stat_error = 0, calibration_error = 0, dispersion = 0, chi2 = 0;
  double distance_mpc = 0, distance_err_mpc = 0;
};

struct ApplyResult {
  std::string calibration_label;
  std::vector<TargetDistance> stars;
  std::vector<HostDistance> hosts;
};

// mu = m0 - M(log P[, Fe/H]); targets need id, log_period, mag0_<relation> and its error,
// group (host; "" = one unnamed host), feh when the relation has a metallicity term.
ApplyResult apply_calibration(const Calibration& calibration, const std::string& relation, const StarTable& targets,
                              const ApplyOptions& options);
// Loads, applies and writes the FITS and CSV products atomically.
ApplyResult apply_calibration_files(const ApplyOptions& options);

}  // namespace rungcal
