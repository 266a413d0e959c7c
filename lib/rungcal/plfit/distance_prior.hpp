// SPDX-License-Identifier: MIT
#pragma once

#include <vector>

#include "rungcal/core/enum_table.hpp"

namespace rungcal {

// The population prior of the calibrators' true distances, p(mu | psi), in the hierarchical
// likelihood (method brief, section 4b). One family covers both choices:
//   p(d) = a / (L^(k+1) Gamma((k+1)/a)) d^k exp(-(d / L)^a),   d in kpc, k > -1, a > 0,
// the generalised gamma distribution (Stacy 1962, Ann. Math. Stat. 33, 1187), mapped to the
// distance modulus with dd/dmu = d ln10 / 5, d = 10^(0.2 mu - 2) kpc. With k = 2, a = 1 it is
// the exponentially decreasing space density of Bailer-Jones 2015 (PASP 127, 994).
//
// The third family makes no assumption of shape: a smooth histogram in the distance modulus,
//   p(mu) = sum_j w_j N(mu | c_j, (kappa h)^2),  c_j = c_0 + j h,  w_j = exp(eta_j) / sum exp(eta),
// with eta_0 = 0 and the other log-weights fitted (a Gaussian mixture on a fixed grid, as in
// density deconvolution, e.g. Bovy, Hogg & Roweis 2011, Ann. Appl. Stat. 5, 1657). A random
// walk hyperprior, eta_(j+1) - eta_j ~ N(0, 1.5^2), keeps bins without stars finite and the
// density smooth (a choice of ours, not a published value). The kernels' width kappa h is a
// fraction kappa of the step: kappa = 1 smooths a sharp edge of the stars' distribution over a
// whole step. Narrower kernels let the fitted density turn lumpy between the centres, which
// then move with alpha: in the simulation study kappa = 0.5 put alpha 2 errors off at N = 3000
// (docs/method.md), so kappa stays within 0.75 to 1.
enum class DistancePriorFamily {
  kSpaceDensity,      // k = 2, a = 1 fixed; the length scale L fitted
  kGeneralizedGamma,  // L, k and a fitted
  kSmoothHistogram,   // log-weights on a grid of distance moduli fitted
};
inline constexpr EnumTable<DistancePriorFamily, 3> kDistancePriorNames{{{
    {DistancePriorFamily::kSmoothHistogram, "smooth_histogram"},
    {DistancePriorFamily::kSpaceDensity, "space_density"},
    {DistancePriorFamily::kGeneralizedGamma, "generalized_gamma"},
}}};

// The random walk hyperprior's default step (see kSmoothHistogram).
inline constexpr double kHistogramWalkSigma = 1.5;
// The default margin of the histogram's grid beyond the data (mag).
inline constexpr double kHistogramMargin = 1.5;
// The default kernel width as a fraction of the step (kappa above), and its allowed range.
inline constexpr double kHistogramKernelFraction = 1.0;
inline constexpr double kHistogramKernelFractionMin = 0.75;

// ln p(mu) and its derivatives at one distance modulus, for hyperparameters L (kpc), k, a.
struct DistancePriorTerms {
  double log_density;  // ln p(mu)
  double d_mu;         // d ln p / d mu
  double d2_mu;        // d^2 ln p / d mu^2 (never positive, except for the histogram)
  double d_log_scale;  // d ln p / d ln L
  double d_power;      // d ln p / d k
  double d_exponent;   // d ln p / d a
};

// The hyperparameters' share of ln p that does not depend on mu, worked out once per
// evaluation: -lnGamma((k+1)/a) + ln a + ln(ln10 / 5), and digamma((k+1)/a).
struct DistancePriorShape {
  double log_scale = 0, power = 2, exponent = 1;
  double constant = 0, digamma_shape = 0;
  // The smooth histogram: grid start c_0, step h, normalised weights; from the kernel
  // fraction kappa, q = 1 / kappa^2 and exp(-q), worked out once (histogram_at runs per
  // star and node).
  bool histogram = false;
  double start = 0, step = 0.5, kernel_q = 1.0, kernel_decay = 0.36787944117144233;
  std::vector<double> weight;
  double log_kernel_norm = 0;  // ln of the bins' Gaussian normalisation, 1 / (kappa h sqrt(2 pi))
  static DistancePriorShape make(double scale_kpc, double power, double exponent);
  // log_weights: eta_1 .. eta_(B-1) (eta_0 = 0).
  static DistancePriorShape make_histogram(double start, double step, double kernel,
                                           const double* log_weights, int bins);
  // d_bins (histogram only, size B - 1): d ln p / d eta_j for j = 1 .. B-1, added to.
  DistancePriorTerms at(double mu, double* d_bins = nullptr, double scale = 1.0) const;
  // The histogram at mu, with each bin's responsibility w_j N_j / p for the bins lo..hi
  // that reach mu: r_scale r[j - lo] (at most kHistogramWindow of them; the caller scales,
  // which it can fold into a weight of its own).
  DistancePriorTerms histogram_at(double mu, int& lo, int& hi, double* r, double& r_scale) const;
};

// The histogram bins that count at one mu: those within kHistogramReach steps of the nearest
// (a bin further away adds exp(-50) of the nearest's kernel; the same bins in the value and
// in its gradient, so the two stay consistent).
inline constexpr int kHistogramReach = 9;
inline constexpr int kHistogramWindow = 2 * kHistogramReach + 1;

// The digamma function psi(x) = d lnGamma / dx for x > 0: recurrence up to x >= 12, then the
// asymptotic series (Abramowitz & Stegun 1964, 6.3.5 and 6.3.18); error below 1e-13.
double digamma(double x);

}  // namespace rungcal
