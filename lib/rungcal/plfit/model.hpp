// SPDX-License-Identifier: MIT
#pragma once

#include <memory>
#include <string>
#include <vector>

#include <Eigen/Core>

#include "rungcal/core/enum_table.hpp"
#include "rungcal/plfit/distance_prior.hpp"
#include "rungcal/plfit/losses.hpp"
#include "rungcal/table/fit_result_schema.hpp"

namespace rungcal {

// How parallax calibrators enter the fit (method brief, sections 4 and 4b).
enum class FitSpace {
  // The hierarchical likelihood (section 4b): each star's true distance modulus is a latent
  // quantity with a fitted population prior, marginalised by Gauss-Hermite quadrature; its
  // magnitude scatters about mu + M by sigma_m and sigma_int, its parallax about
  // 10^(-0.2 (mu - 10)) + offset by sigma_pi; outliers are a mixture component; [Fe/H]
  // errors are marginalised. The default: unbiased where the residual spaces below are not.
  kHierarchical,
  // r = (pi_obs - Z - offset - pi_phot(M)) / s, pi_phot = 10^(-0.2 (m0 - M - 10)),
  // s^2 = sigma_pi^2 + (0.2 ln10 pi_phot)^2 (sigma_m^2 + sigma_int^2). Unbiased for noisy and
  // negative parallaxes: the default.
  kParallax,
  // r = (m0 - 5 log10(100 / (pi - Z - offset)) - M) / s,
  // s^2 = sigma_m^2 + sigma_int^2 + (5 / ln10 sigma_pi / pi)^2. Only pi > 0; biased unless
  // sigma_pi / pi is small (Lutz & Kelker 1973, PASP 85, 573).
  kMagnitude,
  // Astrometry-based luminosity (Arenou & Luri 1999, ASP Conf. 167, 13):
  // a = (pi - Z - offset) 10^(0.2 m0 - 2) against 10^(0.2 M), linear in the parallax;
  // s^2 = (10^(0.2 m0 - 2) sigma_pi)^2 + (0.2 ln10 10^(0.2 M))^2 (sigma_m^2 + sigma_int^2).
  kAbl,
};
inline constexpr EnumTable<FitSpace, 4> kFitSpaceNames{{{
    {FitSpace::kHierarchical, "hierarchical"},
    {FitSpace::kParallax, "parallax"},
    {FitSpace::kMagnitude, "magnitude"},
    {FitSpace::kAbl, "abl"},
}}};

// How a parameter enters the fit.
// ParamMode and its names: table/fit_result_schema.hpp (the fit result records them).

struct ParamSpec {
  ParamMode mode = ParamMode::kFree;
  double value = 0.0;        // fixed value, prior mean, or starting value
  double prior_sigma = 0.0;  // Gaussian prior width (kPrior)
  bool has_start = false;    // value is a starting value for a free parameter
};

// M = alpha + beta (log P - log P0) [+ beta_long (log P - log Pb) for log P > log Pb]
//     [+ gamma [Fe/H]], per-anchor distance moduli mu_g, parallax offset, intrinsic scatter.
struct ModelTerms {
  double pivot_log_period = 1.0;
  bool has_break = false;
  double break_log_period = 1.0;
  bool has_metallicity = false;
  int n_anchors = 0;          // groups sharing a fitted modulus: anchors, then clusters
  bool hierarchical = false;  // the hyperparameters of FitSpace::kHierarchical
  bool feh_errors = false;    // [Fe/H] errors are marginalised: its population mean and spread
  int distance_bins = 0;      // > 0: the smooth-histogram distance prior with this many bins
  bool blends = false;        // the blend component's fraction and scale (hierarchical)
  int n_clusters = 0;  // of n_anchors, the last n_clusters are clusters (FitOptions::clusters)
};

// Where each parameter sits in the parameter vector.
struct ParameterLayout {
  int alpha = 0, beta = 1, beta_long = -1, gamma = -1, offset = -1, sigma = -1, anchor0 = -1;
  // The hierarchical model's own: outlier fraction, distance-prior hyperparameters (L in kpc,
  // k, a: see DistancePriorFamily), and the [Fe/H] population's mean and spread.
  int outlier = -1, outlier_shift = -1, outlier_width = -1;
  int outlier_factor = -1;           // the outlier component's parallax error factor F
  int blend = -1, blend_scale = -1;  // the blend component's fraction and mean brightening (mag)
  int distance_scale = -1, distance_power = -1, distance_exponent = -1;
  int feh_mean = -1, feh_spread = -1;
  int distance_bin0 = -1, distance_bins = 0;  // smooth histogram: log-weights eta_1 .. eta_(B-1)
  int size = 0;
  std::vector<std::string> names;
  static ParameterLayout for_terms(const ModelTerms& terms,
                                   const std::vector<std::string>& anchor_names);
};

// Calibrators of one relation, by kind, as column arrays.
struct FitData {
  struct Common {
    Eigen::ArrayXd x;              // log P_F - log P0
    Eigen::ArrayXd xl;             // max(0, log P_F - log Pb)
    Eigen::ArrayXd feh;            // [Fe/H] (0 when the term is off)
    Eigen::ArrayXd var_feh;        // its error's square (empty: no errors)
    Eigen::ArrayXd m0;             // dereddened (or Wesenheit) apparent magnitude
    Eigen::ArrayXd var_m;          // its variance
    Eigen::ArrayXd weight;         // multiplicity of each row (bootstrap); empty = every row once
    Eigen::ArrayXd sqrt_weight;    // its square root, what the residuals are scaled by
    std::vector<std::size_t> row;  // catalog row, for reporting
    Eigen::Index size() const { return x.size(); }
  };
  Common parallax;         // parallax calibrators
  Eigen::ArrayXd plx;      // pi_obs - Z (mas)
  Eigen::ArrayXd var_plx;  // inflated parallax variance (mas^2)
  Common known;            // stars or clusters with a known distance modulus
  Eigen::ArrayXd mu, var_mu;
  Common anchor;           // stars of anchor galaxies and clusters
  std::vector<int> group;  // group index per anchor star (ModelTerms::n_anchors)
  // Per anchor star: its own parallax, pi_obs - Z (mas), and inflated variance (0: none; only
  // cluster members have one). The hierarchical model's member term (hierarchical.hpp).
  Eigen::ArrayXd anchor_plx, anchor_var_plx;
  // Per group: a cluster's parallax, its variance (0: none) and the multiplicity of its term
  // (the bootstrap draws clusters whole). Empty when no group has one.
  struct GroupParallax {
    double plx = 0, var = 0, weight = 1;
  };
  std::vector<GroupParallax> group_plx;

  Eigen::Index stars() const { return parallax.size() + known.size() + anchor.size(); }
  // Resample: rows of each kind chosen by index (with repeats), for the bootstrap. Repeated
  // rows are kept once with their count as weight: the same objective, fewer residuals.
  FitData take(const std::vector<Eigen::Index>& p, const std::vector<Eigen::Index>& k,
               const std::vector<Eigen::Index>& a) const;
  FitData without(const std::vector<bool>& drop_p, const std::vector<bool>& drop_k,
                  const std::vector<bool>& drop_a) const;
};

// Whether any star or cluster of d has a parallax: the offset is measured only then.
bool has_any_parallax(const FitData& d);

// How a free intrinsic scatter is estimated.
enum class ScatterEstimator {
  // sigma solves the Gaussian likelihood's score equation for sigma, with each star's
  // s^2 = A + B sigma^2 taken at the solution (A, B frozen and iterated to a fixed point);
  // the other parameters solve their weighted least-squares equations. In parallax space
  // B = (0.2 ln10 pi_phot)^2 depends on the zero point, and the full likelihood's ln s^2
  // term then pulls the zero point (0.4 sigma in tests/fit_stage_test.cpp's simulation):
  // the scatter is Gaussian in magnitude, not in parallax. The default.
  kDecoupled,
  // The full Gaussian likelihood, normalisation included, over all parameters at once.
  kLikelihood,
};
inline constexpr EnumTable<ScatterEstimator, 2> kScatterEstimatorNames{{{
    {ScatterEstimator::kDecoupled, "decoupled"},
    {ScatterEstimator::kLikelihood, "likelihood"},
}}};

// The hierarchical model's blend component: stars made brighter by an unresolved companion.
enum class BlendComponent {
  kNone,  // no such component: blends are left to the broad outlier component
  // A magnitude brighter than a member's by b ~ Exp(mean s), s = blend_scale_mag fitted:
  // the member Gaussian convolved with a one-sided exponential, the exponentially modified
  // Gaussian (Grushka 1972, Anal. Chem. 44, 1733), closed form in erfc (blend_density.hpp).
  // Parallax as a member's. Its density peaks at the start and so reaches into the members'
  // bright tail (sigma_int low: docs/method.md).
  kExponential,
  // A brightening b ~ Gamma(shape 2, mean s) instead: its density rises from zero at the
  // start, so the component claims no members' bright tail, and falls exponentially
  // (a companion of comparable light is likelier than a barely-there one). Closed form in
  // phi and Phi (blend_rising_log_density in blend_density.hpp). The default: the
  // simulation study in docs/method.md.
  kRising,
};
inline constexpr EnumTable<BlendComponent, 3> kBlendComponentNames{{{
    {BlendComponent::kNone, "none"},
    {BlendComponent::kExponential, "exponential"},
    {BlendComponent::kRising, "rising"},
}}};

// The outlier component's parallax term, a law of the deviation e = pi - pi(mu) - offset with
// s = outlier_parallax_factor x the star's parallax error.
enum class OutlierParallaxLaw {
  // N(e | 0, s^2), with the magnitude widened by outlier_mag_width: dense at e = 0, so it
  // needs the width (1 mag) to keep off the members' tails, and a star whose parallax alone
  // is off then pays that width and stays a member (alpha faint, offset low at N = 3000:
  // docs/method.md). The default until 2026-12-04.
  kGaussian,
  // (e^2 / s^2) N(e | 0, s^2), zero at e = 0 and peaked at +-sqrt(2) s: a deviation that is
  // gross by definition, which claims no member whose parallax agrees with its magnitude (the
  // parallax counterpart of the rising blend component). Normalised: E[e^2] = s^2. A parallax
  // star's outlier then takes the member's magnitude term: only the parallax-magnitude
  // discrepancy is seen, whatever its cause. outlier_mag_width and outlier_mag_shift apply
  // to the stars whose distance is given (known-distance stars, anchor galaxies). The
  // default from 2026-12-04 to 2026-12-05: docs/simulation-history.md, "The rising
  // parallax law of the outlier component".
  kRising,
  // (e^4 / 3 s^4) N(e | 0, s^2), vanishing to fourth order at e = 0 and peaked at +-2 s (|e| / s
  // is chi with five degrees of freedom): less mass than the rising law within a few errors,
  // where the members' tails are. E[e^2] = 5 s^2. The magnitude as under the rising law. The
  // default since 2026-12-05, with its factor F fitted: docs/simulation-history.md, "The
  // default model since 2026-12-05".
  kQuartic,
};
inline constexpr EnumTable<OutlierParallaxLaw, 3> kOutlierParallaxLawNames{{{
    {OutlierParallaxLaw::kGaussian, "gaussian"},
    {OutlierParallaxLaw::kRising, "rising"},
    {OutlierParallaxLaw::kQuartic, "quartic"},
}}};

// The power k of the outlier's parallax law (e^2 / s^2)^k N(e | 0, s^2) / (2k - 1)!!: 0 for
// the Gaussian, 1 rising, 2 quartic. (2k - 1)!! = E[(e / s)^2k] normalises it.
inline int outlier_parallax_power(OutlierParallaxLaw law) {
  return law == OutlierParallaxLaw::kQuartic ? 2 : (law == OutlierParallaxLaw::kRising ? 1 : 0);
}
// The outlier's parallax factor F lies above 3 (a deviation of three errors or fewer is a
// member's; solved as ln(F - 3), Scale::kLogAboveThree). At its floor it has no interior
// maximum, and so no error.
inline bool outlier_factor_at_floor(double factor) { return factor - 3.0 < 1e-3; }
// ln (2k - 1)!! for the power k: ln 3 for k = 2, else 0.
inline double outlier_parallax_log_norm(int power) {
  return power == 2 ? 1.0986122886681096914 : 0.0;
}

// How the hierarchical fit estimates the intrinsic scatters.
enum class ScatterCorrection {
  // Maximum likelihood: each scatter leans low by about p / sqrt(2N) of its error, p the
  // location parameters (alpha, beta, gamma, the offset, anchors' moduli) the same data fit:
  // -0.40 errors at N = 100, -0.18 at N = 300 on the study's mocks (docs/method.md).
  kNone,
  // Restricted maximum likelihood (Patterson & Thompson 1971, Biometrika 58, 545): the
  // location parameters are integrated out, by Laplace's approximation, before the scatters
  // are estimated, i.e. -ln L + 1/2 ln det H_LL, H_LL the Hessian's location block. Taken as
  // one Newton step from the maximum-likelihood optimum (likelihood_solver.hpp,
  // restricted_step), which for a linear Gaussian model gives sigma^2 = RSS / (N - p) to
  // O(p^2 / N^2).
  kRestricted,
};
inline constexpr EnumTable<ScatterCorrection, 2> kScatterCorrectionNames{{{
    {ScatterCorrection::kNone, "none"},
    {ScatterCorrection::kRestricted, "restricted"},
}}};

// The errors the hierarchical fit reports.
enum class CovarianceEstimate {
  // The inverse Hessian of -ln L: the estimates' covariance when the model is the data's law.
  kHessian,
  // The sandwich over the stars (likelihood_solver.hpp, sandwich_from_hessian): also when the
  // model is not, e.g. contaminants drawn from another law than the fit's components.
  kSandwich,
};
inline constexpr EnumTable<CovarianceEstimate, 2> kCovarianceEstimateNames{{{
    {CovarianceEstimate::kHessian, "hessian"},
    {CovarianceEstimate::kSandwich, "sandwich"},
}}};

// The hierarchical likelihood's fixed choices (FitSpace::kHierarchical).
struct HierarchicalSettings {
  DistancePriorFamily prior = DistancePriorFamily::kSmoothHistogram;
  int quadrature_nodes = 24;  // Gauss-Hermite nodes per star and component
  // The outlier component: the member's magnitude variance plus outlier_mag_width^2, its
  // magnitude brighter by outlier_mag_shift (blends only brighten), its parallax error
  // times outlier_parallax_factor, its parallax law outlier_parallax (under the quartic and
  // rising laws a parallax star's outlier has the member's magnitude term). The shift, width
  // and factor are parameters (outlier_shift_mag, outlier_width_mag, outlier_parallax_factor):
  // their fixed values, or their starts when free (the factor is free by default:
  // FitOptions::outlier_factor).
  double outlier_mag_width = 1.0;
  double outlier_mag_shift = 0.0;
  double outlier_parallax_factor = 6.0;
  OutlierParallaxLaw outlier_parallax = OutlierParallaxLaw::kQuartic;
  // The scatters' estimate (ScatterCorrection).
  ScatterCorrection scatter_correction = ScatterCorrection::kRestricted;
  // The reported covariance (CovarianceEstimate); the restricted step and the bootstrap's
  // metric always use the inverse Hessian.
  CovarianceEstimate covariance = CovarianceEstimate::kHessian;
  // The blend component (BlendComponent); its fraction and scale are parameters
  // (blend_fraction, blend_scale_mag).
  BlendComponent blends = BlendComponent::kRising;
  // Blends start this much brighter (mag): the brightening is b = blend_min_mag + Gamma(2,
  // mean s) (or + Exp(s)), a companion giving at least a quarter of the light. Fainter
  // companions count as intrinsic scatter: a component reaching into the member core takes
  // the members' bright tail for blends (sigma_int biased low: docs/method.md).
  double blend_min_mag = 0.3;
  // The smooth-histogram prior's grid: first centre and step (mag); the bin count is the
  // layout's (ModelTerms::distance_bins). Placed over the data by histogram_grid(). A
  // quarter magnitude: kernels as wide as a 0.5 mag step spread the prior beyond a sharp
  // edge of the stars' moduli, which put the offset +0.54 and sigma_int -0.31 errors off
  // at N = 3000 (docs/simulation-history.md, "The default model since 2026-12-04, later").
  double histogram_start = 8.0;
  double histogram_step = 0.25;
  // The grid moves with alpha: centres c_0 - (alpha - histogram_alpha_ref) + j h. With
  // precise magnitudes the stars' moduli move rigidly with alpha, and a fixed grid fits a
  // sharp edge of their distribution better at some shifts than others, which then pulls
  // alpha (docs/simulation-history.md, "a sharp far edge": up to 4 errors with weak
  // parallaxes). A grid that moves with alpha keeps that fit the same for every alpha. The
  // alpha the grid was placed for:
  double histogram_alpha_ref = 0.0;
  double histogram_walk_sigma =
      kHistogramWalkSigma;                     // random-walk hyperprior step of the log-weights
  double histogram_margin = kHistogramMargin;  // grid beyond the data's 0.5-99.5% range (mag)
  // The bins' Gaussian width as a fraction of the step (distance_prior.hpp: kappa).
  double histogram_kernel = kHistogramKernelFraction;
};

struct FitSettings {
  HierarchicalSettings hierarchical;
  ScatterEstimator scatter_estimator = ScatterEstimator::kDecoupled;
  FitSpace space = FitSpace::kParallax;
  LossKind loss = LossKind::kNone;
  double loss_scale = 3.0;  // in units of sigma
  ModelTerms terms;
  std::vector<ParamSpec> params;  // by ParameterLayout index
  // Correlation of the anchors' moduli priors (anchor order; their centres and sigmas stay in
  // params); empty: independent. Read through prior_rows (priors.hpp).
  Eigen::MatrixXd anchor_prior_correlation;
  int max_iterations = 200;
  // Convergence: |delta cost| / cost below function_tolerance, or a step below
  // parameter_tolerance relative to the parameters. The bootstrap relaxes both (its
  // resamples start at the optimum and need far less than their statistical error).
  double function_tolerance = 1e-15;
  double parameter_tolerance = 1e-13;
  // Levenberg-Marquardt's first trust region (Ceres' default 1e4). A resample that starts
  // one Gauss-Newton step from its optimum takes full steps at once with a larger one.
  double initial_trust_region_radius = 1e4;
  // The hierarchical solver's metric (bootstrap resamples): F x F with F the free
  // parameters, P P^T the full sample's inverse Hessian in the solver's coordinates. BFGS
  // then starts from the curvature it would otherwise spend its first iterations learning.
  std::shared_ptr<const Eigen::MatrixXd> preconditioner;
};

// The raw (non-robust) normalised residual of every star at a parameter vector, in the
// order parallax, known, anchor; and s^2 of each.
struct StarResiduals {
  Eigen::ArrayXd r, s2, model_abs_mag,
      predicted;              // predicted: pi_phot (parallax space) or m0 model
  Eigen::ArrayXd membership;  // hierarchical: probability of being a member, not an outlier
};
StarResiduals star_residuals(const FitData& data, const FitSettings& settings,
                             const ParameterLayout& layout, const Eigen::VectorXd& theta);

struct FitSolution {
  Eigen::VectorXd theta;
  bool usable = false;      // Ceres: IsSolutionUsable()
  std::string termination;  // Ceres termination type
  std::string message;
  int iterations = 0;
  double cost = 0;  // 1/2 sum rho + normalisation + priors, at the optimum
  std::string brief_report;
};

// Solves with Ceres (Levenberg-Marquardt, dense normal-equation Cholesky) from a start vector. With
// the scatter free, the Gaussian likelihood's log-normalisation sum ln s^2 is part of the objective
// (as extra residuals sqrt(ln s_i^2 + K_i), K_i keeping the root real): least squares alone
// would drive the scatter to infinity. See ScatterEstimator for which parameters it acts on.
FitSolution solve_fit(const FitData& data, const FitSettings& settings,
                      const ParameterLayout& layout, const Eigen::VectorXd& start);

// theta plus one Gauss-Newton step of the objective on this data (fixed parameters kept):
// a cheap start for a bootstrap resample, whose optimum is a small step from the full fit's.
Eigen::VectorXd gauss_newton_start(const FitData& data, const FitSettings& settings,
                                   const ParameterLayout& layout, const Eigen::VectorXd& theta);

// Covariance of the parameters at the optimum (Ceres Covariance, dense SVD); fixed
// parameters get zero rows. Returns false when the Jacobian is rank-deficient.
bool fit_covariance(const FitData& data, const FitSettings& settings, const ParameterLayout& layout,
                    const Eigen::VectorXd& theta, Eigen::MatrixXd& covariance);

// A starting vector: magnitude-space least squares on the stars with good parallaxes or
// known distances, then the settings' values for fixed/prior/started parameters.
Eigen::VectorXd starting_vector(const FitData& data, const FitSettings& settings,
                                const ParameterLayout& layout);

}  // namespace rungcal
