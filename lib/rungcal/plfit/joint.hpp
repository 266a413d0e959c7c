// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Core>

#include "rungcal/plfit/losses.hpp"
#include "rungcal/plfit/model.hpp"

namespace rungcal {

// How a joint-fit star's distance is known.
enum class JointStarKind : std::uint8_t {
  kParallax,       // its own parallax (plx, var_plx)
  kKnownDistance,  // a given modulus (mu, var_mu)
  kGroup,          // an anchor galaxy's or a cluster's modulus (group); maybe its own parallax too
};

// Parallax calibrators seen in several relations at once (bands, Wesenheit magnitudes):
// one entry per star and relation, grouped by star.
struct JointData {
  int relations = 0;
  std::vector<int> first;     // per star: index of its first entry; size stars + 1
  std::vector<int> relation;  // per entry: which relation
  std::vector<double> x, m0, var_phot,
      coefficient;  // per entry: log P - log P0, magnitude,
                    // photometric variance, A/E(B-V) left in the magnitude
  std::vector<double> plx, var_plx, var_ebv, feh;  // per star
  std::vector<double> var_feh;      // per star: [Fe/H] error squared (hierarchical joint; 0: none)
  std::vector<JointStarKind> kind;  // per star
  std::vector<int> group;           // per star: its anchor or cluster (kGroup), else -1
  std::vector<double> mu, var_mu;   // per star: the given modulus (kKnownDistance)
  // plx and var_plx of a kGroup star: a cluster member's own parallax (var_plx 0: none).
  std::vector<FitData::GroupParallax> group_plx;  // per group: a cluster's parallax (FitData's)
  std::vector<std::size_t> row;                   // per star: catalog row
  // Per star: how many times a bootstrap resample drew it (empty: once each). The
  // hierarchical joint likelihood counts a star's term that many times, so a resample
  // evaluates each drawn star once (about 63% of them) instead of once per draw.
  std::vector<double> weight;
  int stars() const { return static_cast<int>(plx.size()); }
  double weight_of(int star) const {
    return weight.empty() ? 1.0 : weight[static_cast<std::size_t>(star)];
  }
  // Whether any star or cluster has a parallax: the offset is measured only then.
  bool has_parallax() const;
  // The stars given by index (repeats allowed), with all their entries: a bootstrap sample.
  JointData take(const std::vector<int>& stars) const;
  // The same sample with each drawn star once, weighted by its number of draws (in index order).
  JointData take_counted(const std::vector<int>& stars) const;
};

// Parameters: alpha_r, beta_r (or one shared beta), gamma_r, the shared parallax offset,
// and one distance modulus per anchor galaxy. The hierarchical joint fit
// (joint_hierarchical.hpp) adds each relation's intrinsic scatter sigma_int_r, the scatter's
// correlation between relations, and the hierarchical model's shared parameters, named and
// scaled as in ParameterLayout.
struct JointLayout {
  std::vector<int> alpha, beta, gamma;  // per relation; gamma -1 when the relation has none
  int offset = -1;
  int anchor0 = -1, n_anchors = 0;
  int size = 0;
  std::vector<std::string> names;
  std::vector<int> sigma;  // per relation (hierarchical only)
  int correlation = -1;    // rho (hierarchical only)
  int outlier = -1, outlier_shift = -1, outlier_width = -1, blend = -1, blend_scale = -1;
  int outlier_factor = -1;
  int distance_scale = -1, distance_power = -1, distance_exponent = -1;
  int distance_bin0 = -1, distance_bins = 0;
  int feh_mean = -1, feh_spread = -1;
  // Per relation (hierarchical, with blends): a blend's brightening in the relation over its
  // brightening in the first relation's (-1 for the first: 1 by definition).
  std::vector<int> blend_ratio;
  static JointLayout make(const std::vector<std::string>& relation_names,
                          const std::vector<bool>& metallicity, bool shared_slope,
                          const std::vector<std::string>& anchors = {});
  // The hierarchical joint layout: the shared parameters are those of `shared` (a single
  // relation's hierarchical layout), [Fe/H]'s population when feh_errors.
  static JointLayout make_hierarchical(const std::vector<std::string>& relation_names,
                                       const std::vector<bool>& metallicity, bool shared_slope,
                                       const std::vector<std::string>& anchors,
                                       const ParameterLayout& shared, bool feh_errors);
};

struct JointSettings {
  LossKind loss = LossKind::kNone;
  double loss_scale = 3.0;
  std::vector<double> sigma_int;  // per relation, fixed (from each relation's own fit)
  // Correlation of one star's intrinsic scatter between relations (its place in the
  // instability strip moves every band): C_bc += (k pi_b)(k pi_c) rho sigma_b sigma_c.
  double scatter_correlation = 0.0;
  std::vector<bool> fixed;                               // per parameter
  std::vector<std::pair<double, double>> anchor_priors;  // per anchor: mean and sigma of mu
  Eigen::MatrixXd anchor_correlation;  // of the anchors' priors; empty: independent
};

struct JointSolution {
  Eigen::VectorXd theta;
  Eigen::MatrixXd covariance;
  bool usable = false, covariance_ok = false;
  std::string message, termination;
  int iterations = 0, passes = 0;
  double chi2 = 0;
  int entries = 0;
};

// Generalised least squares with each star's covariance between its relations. Parallax
// calibrators: residuals e_b = pi - offset - pi_phot,b, covariance
// C_bc = sigma_pi^2 + (k pi_b)(k pi_c) [delta_bc (sigma_phot,b^2 + sigma_int,b^2) + R_b R_c
// sigma_E^2] (k = 0.2 ln 10: the parallax is shared, so is the E(B-V) error). Known-distance and
// anchor stars: e_b = m0_b - mu - M_b, C_bc = sigma_mu^2 + delta_bc (sigma_phot,b^2 +
// sigma_int,b^2)
// + ... (the same scatter and E(B-V) terms without (k pi)^2), mu an anchor's parameter with
// its Gaussian prior. Each star's residual
// vector is whitened by the Cholesky factor of C(theta) itself, derivatives by Ceres'
// automatic differentiation: freezing C at the solution instead (a fixed point) biases the
// zero points, by 0.23 mag for three relations in tests/plfit_test.cpp's simulation. The
// robust loss acts on each star's whole Mahalanobis distance: a star is an outlier or not.
JointSolution solve_joint(const JointData& data, const JointSettings& settings,
                          const JointLayout& layout, const Eigen::VectorXd& start,
                          bool with_covariance = true);

}  // namespace rungcal
