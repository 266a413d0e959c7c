// SPDX-License-Identifier: MIT
#pragma once

#include <cmath>
#include <cstdint>
#include <limits>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "rungcal/astrometry/astrometry.hpp"
#include "rungcal/core/enum_table.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/stage_files.hpp"
#include "rungcal/plfit/joint.hpp"
#include "rungcal/plfit/model.hpp"
#include "rungcal/table/fit_result_schema.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// The fit result's keys, records and schema version (kFitSchemaVersion):
// table/fit_result_schema.hpp.

// One period-luminosity relation to fit.
// The most bootstrap resamples a fit takes: far beyond what percentiles need (a few
// thousand), and small enough that the resample table fits in memory.
constexpr int kMaxBootstrap = 100000;

struct RelationOptions {
  std::string name;               // label in outputs (default: the band)
  std::string band;               // band or Wesenheit name: uses mag0_<band>, mag0_err_<band>
  std::string magnitude_column;   // override, e.g. "mag_W_H" for a Wesenheit given in the input
  std::string error_column;       // override of the error column
  double pivot_log_period = 1.0;  // log P0
  ParamSpec alpha;                // absolute magnitude at log P0: free, fixed or with a prior
  ParamSpec slope;                // beta: free, fixed (e.g. -3.26) or with a prior
  ParamSpec slope_long;           // beta_long above the break: free, fixed or with a prior
  ParamSpec gamma;  // metallicity term (mag/dex): free, fixed (e.g. -0.17) or with a prior
  std::optional<double> break_log_period;                    // a second slope above log Pb when set
  bool metallicity = false;                                  // gamma [Fe/H] term
  std::vector<std::string> classes = {"classical_cepheid"};  // pulsator classes used
  std::vector<std::string> modes = {"fundamental", "first_overtone"};  // modes used
  bool fundamentalize = true;  // first-overtone periods -> fundamental (fundamentalized_log_period)
  double min_log_period =
      -std::numeric_limits<double>::infinity();  // of the (fundamentalized) period
  double max_log_period = std::numeric_limits<double>::infinity();
};

// An anchor galaxy: its stars (catalog group == name) share one distance modulus, a fit
// parameter with a Gaussian prior from a geometric distance.
struct AnchorOptions {
  std::string group;
  double mu = 0;
  double mu_err = 0;
};

// A star cluster (or any group of calibrators at one distance): its members (catalog group ==
// name) share one true distance modulus mu_c, a fit parameter. What fixes mu_c: the cluster's
// parallax (mas, with the same zero point already applied as the members'; the fit's offset
// is added to it, as to theirs), its distance modulus, or both. A member with its own usable
// parallax uses it as well: ln N(pi_i | 10^(-0.2 (mu_c - 10)) + offset, sigma_i^2) in the
// member's likelihood (docs/method.md, "Clusters"). The parallax terms need the hierarchical
// space; in the other spaces a cluster with a modulus is fitted as an anchor is.
struct ClusterOptions {
  std::string group;
  double parallax_mas = std::numeric_limits<double>::quiet_NaN();  // cluster parallax (NaN: none)
  double parallax_err_mas = std::numeric_limits<double>::quiet_NaN();  // its error
  double mu = std::numeric_limits<double>::quiet_NaN();      // cluster distance modulus (NaN: none)
  double mu_err = std::numeric_limits<double>::quiet_NaN();  // its error
  bool has_parallax() const { return std::isfinite(parallax_mas); }
  bool has_modulus() const { return std::isfinite(mu); }
  // The residual spaces' Gaussian prior on mu_c: the modulus when given, else the parallax's
  // first-order modulus 10 - 5 log10(pi) +- (5 / ln 10) sigma_pi / pi, without the fit's offset
  // (a parallax S/N of 10 or more keeps that conversion's bias below 0.01 mag).
  std::pair<double, double> modulus_prior() const;
};

struct FitOptions {
  std::string input_path;                    // dereddened catalog (HDU CATALOG)
  std::string output_path = "out/fit.json";  // the fit result
  std::string residuals_path;                // per-star residuals (FITS); "" = beside the result
  FitSpace space =
      FitSpace::kHierarchical;  // how parallax calibrators enter (section 4b model by default)
  HierarchicalSettings
      hierarchical;  // the hierarchical model's distance prior, quadrature and outlier component
  LossKind loss =
      LossKind::kNone;  // robust loss (residual spaces only; the hierarchical model has a mixture)
  double loss_scale = 3.0;                              // its scale, in units of each star's sigma
  double clip_sigma = 0.0;                              // > 0: iterative k-sigma clipping on |r|
  int clip_iterations = 10;                             // at most this many clipping passes
  ZeroPointRecipe zero_point = ZeroPointRecipe::kNone;  // parallax zero point Z
  double zero_point_mas = 0.0;                          // Z for the constant recipe
  std::string zero_point_table_5p;                      // Lindegren et al. 2021 tables
  std::string zero_point_table_6p;
  InflationRecipe inflation = InflationRecipe::kNone;  // parallax error inflation
  double inflation_factor = 1.0;                       // for the constant recipe
  double max_ruwe = 0.0;     // > 0: parallax stars with RUWE above are refused
  bool use_known_mu = true;  // stars with mu_mag enter as known-distance calibrators
  ParamSpec offset;          // residual parallax offset (mas): free, fixed or prior
  ParamSpec scatter{ParamMode::kFree, 0.1, 0,
                    true};  // intrinsic scatter: free, fixed, or a prior (hierarchical)
  // The hierarchical model's own parameters: free by default, each may be fixed or given a prior.
  ParamSpec outlier_fraction;                                // share of outliers in the mixture
  ParamSpec outlier_shift{ParamMode::kFixed, 0.0, 0, true};  // outlier component brighter by (mag)
  ParamSpec outlier_width{ParamMode::kFixed, 1.0, 0, true};  // its extra magnitude width (mag)
  // Its parallax scale over the star's error, F > 3 (HierarchicalSettings::
  // outlier_parallax_factor). Free by default from 6, where the quartic law settles on the
  // study's mocks (docs/method.md); has_start false marks that default, which a sample
  // without parallaxes of its own holds quietly (hold_unconstrained).
  ParamSpec outlier_factor{ParamMode::kFree, 6.0, 0, false};
  ParamSpec blend_fraction;  // share of blends (of the non-outliers)
  // Blends' mean brightening beyond their start (mag). A Gaussian prior 0.5 +- 0.15 by default:
  // free, the scale shrinks onto the members' bright tail when there are few or no blends
  // (sigma_int 0.6 errors low, alpha 0.6 faint on mocks without blends: docs/method.md).
  ParamSpec blend_scale{ParamMode::kPrior, 0.5, 0.15, true};
  ParamSpec distance_scale;        // distance prior's length scale L (kpc)
  ParamSpec distance_power;        // its power k (fixed at 2 by the space-density family)
  ParamSpec distance_exponent;     // its exponent a (fixed at 1 by the space-density family)
  ParamSpec feh_mean, feh_spread;  // the [Fe/H] population (when [Fe/H] errors are given)
  ScatterEstimator scatter_estimator =
      ScatterEstimator::kDecoupled;  // how a free scatter is estimated
  bool joint = false;                // also fit all relations at once, one parallax offset
  bool joint_shared_slope = false;   // ... and one slope for all relations
  // Correlation rho of a star's intrinsic scatter between relations: a bare number fixes it
  // (the GLS joint fit always holds it at its value, 0 unless given); free by default in the
  // hierarchical joint fit.
  ParamSpec joint_scatter_correlation;
  // A blend's brightening in each relation over its brightening in the first (hierarchical
  // joint fit with blends): free by default, one ratio per relation after the first, each
  // starting at this value; a bare number fixes them all (1: grey blends). Companions are
  // seldom the Cepheid's colour: grey blends biased a V, I, K joint fit (docs/method.md).
  ParamSpec joint_blend_ratio{ParamMode::kFree, 1.0, 0, true};
  int bootstrap = 0;  // resamples over stars (0: none)
  // The joint fit's resamples (-1: as bootstrap): each solves every relation at once, so a
  // smaller count keeps a nightly run short.
  int joint_bootstrap = -1;
  int joint_resamples() const { return joint_bootstrap >= 0 ? joint_bootstrap : bootstrap; }
  std::uint64_t seed = 1;  // bootstrap seed: results are the same for any thread count
  int threads = 0;         // 0: all cores
  std::vector<RelationOptions> relations;
  std::vector<AnchorOptions> anchors;
  // Covariance of the anchors' moduli priors (mag^2, [[anchor]] order; published distances
  // share systematics); empty: independent, each with its mu_err. When given, each anchor's
  // mu_err may be left out and is otherwise checked against the diagonal.
  Eigen::MatrixXd anchor_covariance;
  std::vector<ClusterOptions> clusters;
  // A member whose own parallax differs from its cluster's by more than this many combined
  // errors is refused as a non-member (its reason names both parallaxes); 0: never. Common
  // practice in cluster-Cepheid work is a 3-5 sigma membership cut on parallax.
  double cluster_member_max_sigma = 5.0;
  // The groups whose stars share a fitted modulus: the anchors, then the clusters.
  std::vector<std::string> group_names() const;
  double anchor_prior_sigma(std::size_t g) const;  // sqrt of the diagonal, else the anchor's mu_err
  std::string config_file, config_sha256;
  nlohmann::json resolved;  // the options as read, for the result file

  // "" when usable, else "field: rule".
  std::string check() const;
  std::string check_clusters() const;  // the [[cluster]] part of check()
};

FitOptions fit_options_from_file(const std::string& path);

// What the stage reads: the dereddened catalog and the zero-point tables its config names
// (named is read: a grid variant may switch to their recipe); what it writes: the result and
// the residuals FITS.
StageFiles declared_files(const FitOptions& options);
// The residuals FITS: residuals_path, or <result stem>_residuals.fits beside the result.
std::string fit_residuals_path(const FitOptions& options);

// CalibratorKind and its names (the residual table's `kind` column):
// table/fit_result_schema.hpp, where the report reads them too.

// What happened to one catalog star in one relation.
struct StarOutcome {
  std::size_t row = 0;
  std::string id;
  std::string group;  // the catalog's group value ("" when none)
  CalibratorKind kind = CalibratorKind::kNone;
  bool used = false;
  bool member_parallax = false;  // a cluster member whose own parallax enters (hierarchical)
  std::string reason;  // why not used (for a used cluster member: why its own parallax is not)
  double log_period = 0, m0 = 0, m0_err = 0;
  double plx = std::numeric_limits<double>::quiet_NaN(),
         plx_err = std::numeric_limits<double>::quiet_NaN();
  double residual = std::numeric_limits<double>::quiet_NaN();  // normalised, at the optimum
  double model_abs_mag = std::numeric_limits<double>::quiet_NaN();
  double predicted =
      std::numeric_limits<double>::quiet_NaN();  // pi_phot (parallax space) or m0 model
  double membership = std::numeric_limits<double>::quiet_NaN();  // hierarchical: probability of not
                                                                 // being an outlier
};

// theta less restricted maximum likelihood's shift (none when the shift is empty): the
// likelihood's own optimum (RelationResult::restricted_shift).
inline Eigen::VectorXd less_restricted_shift(const Eigen::VectorXd& theta,
                                             const Eigen::VectorXd& shift) {
  return shift.size() ? Eigen::VectorXd(theta - shift) : theta;
}

struct RelationResult {
  RelationOptions relation;
  ParameterLayout layout;
  FitSettings settings;
  FitSolution solution;
  Eigen::MatrixXd covariance;
  bool covariance_ok = false;
  // "hessian": the inverse Hessian of -ln L (or the Gauss-Newton inverse); "sandwich": a
  // robust loss's A^-1 B A^-1 (sandwich.hpp).
  std::string covariance_method = "hessian";
  Eigen::MatrixXd bootstrap;  // resamples x parameters
  int bootstrap_failed = 0;
  // Restricted maximum likelihood's move of the parameters from the likelihood's optimum
  // (ScatterCorrection::kRestricted; empty otherwise). Resamples are solved by maximum
  // likelihood and moved by the same amount, so the bootstrap describes the reported
  // estimator.
  Eigen::VectorXd restricted_shift;
  // The likelihood's own optimum (solution.theta less restricted_shift).
  Eigen::VectorXd likelihood_optimum() const {
    return less_restricted_shift(solution.theta, restricted_shift);
  }
  std::vector<StarOutcome> stars;
  std::vector<std::string> undetermined;  // free parameters the data could not determine (no error)
  double chi2 = 0, neg2_log_likelihood = 0, aic = 0, bic = 0;
  int dof = 0, n_used = 0, n_clipped = 0, n_free = 0;
  std::vector<std::string> warnings;
  double parameter(const std::string& name) const;
  double error(const std::string& name) const;  // from the covariance
  // Half the resamples' 16-84 percentile width (fit_parts.hpp, bootstrap_spread).
  double bootstrap_error(const std::string& name) const;
};

// The relations fitted together (FitOptions::joint): every kind of calibrator, each
// relation's intrinsic scatter from its own fit.
struct JointResult {
  std::string method;  // "hierarchical" (joint_hierarchical.hpp) or "gls" (joint.hpp)
  std::vector<std::string> relations;
  JointLayout layout;
  JointData data;
  JointSolution solution;
  int stars = 0;
  int n_free = 0;             // parameters the joint fit estimated
  Eigen::MatrixXd bootstrap;  // resamples x parameters (NaN rows: failed resamples)
  int bootstrap_failed = 0;
  Eigen::VectorXd restricted_shift;           // as RelationResult's
  std::string covariance_method = "hessian";  // as RelationResult's
  Eigen::VectorXd likelihood_optimum() const {
    return less_restricted_shift(solution.theta, restricted_shift);
  }
  std::vector<std::string> warnings;
  // Hierarchical only: -2 ln L at the optimum, each star's membership probability (data
  // order), and the free parameters on an edge of their domain (no error).
  double neg2_log_likelihood = std::numeric_limits<double>::quiet_NaN();
  std::vector<double> membership;
  std::vector<std::string> undetermined;
  // Hierarchical only: the settings the joint likelihood was solved with (parameter modes
  // and priors by layout index, the histogram's grid), for joint_hierarchical_value.
  FitSettings settings;
};

struct FitResult {
  std::vector<RelationResult> relations;
  std::optional<JointResult> joint;
  nlohmann::json extinction;  // law, R_V and band-table hash of the dereddened input
  Provenance provenance;
  nlohmann::json to_json(const FitOptions& options) const;
};

// Selects each relation's calibrators (every refused star keeps its reason), fits, clips,
// and computes covariance and bootstrap errors; then the joint fit when asked. coefficients:
// the deredden product's COEFFS table (A/E(B-V) per band), for the joint fit's E(B-V)
// covariance; without it E(B-V) errors are taken as independent between relations.
// Writes nothing.
FitResult run_fit(const FitOptions& options, const StarTable& catalog,
                  const StarTable* coefficients = nullptr);
// Reads the catalog, runs, writes the result JSON and the residuals FITS atomically.
FitResult fit_catalog_file(const FitOptions& options);
// A few lines a person reads on the terminal.
std::string fit_summary(const FitResult& result);

}  // namespace rungcal
