// SPDX-License-Identifier: MIT
#include "rungcal/plfit/distance_prior.hpp"

#include <algorithm>
#include <cmath>

namespace rungcal {
namespace {
constexpr double kLn10 = 2.302585092994045684;
constexpr double kC = 0.2 * kLn10;  // d ln d / d mu
}  // namespace

double digamma(double x) {
  double shift = 0.0;
  while (x < 12.0) {
    shift -= 1.0 / x;
    x += 1.0;
  }
  const double inv = 1.0 / x, inv2 = inv * inv;
  // psi(x) ~ ln x - 1/(2x) - sum B_2n / (2n x^2n)
  const double series =
      inv2 * (1.0 / 12 -
              inv2 * (1.0 / 120 - inv2 * (1.0 / 252 - inv2 * (1.0 / 240 - inv2 * (1.0 / 132)))));
  return shift + std::log(x) - 0.5 * inv - series;
}

DistancePriorShape DistancePriorShape::make(double scale_kpc, double power, double exponent) {
  DistancePriorShape s;
  s.log_scale = std::log(scale_kpc);
  s.power = power;
  s.exponent = exponent;
  const double shape = (power + 1.0) / exponent;
  s.constant = -std::lgamma(shape) + std::log(exponent) + std::log(kC);
  s.digamma_shape = digamma(shape);
  return s;
}

DistancePriorShape DistancePriorShape::make_histogram(double start, double step, double kernel,
                                                      const double* log_weights, int bins) {
  DistancePriorShape s;
  s.histogram = true;
  s.start = start;
  s.step = step;
  s.kernel_q = 1.0 / (kernel * kernel);
  s.kernel_decay = std::exp(-s.kernel_q);
  s.weight.assign(static_cast<std::size_t>(bins), 1.0);
  double top = 0;
  for (int j = 1; j < bins; ++j) top = std::max(top, log_weights[j - 1]);
  double sum = 0;
  for (int j = 0; j < bins; ++j)
    sum += s.weight[static_cast<std::size_t>(j)] = std::exp((j ? log_weights[j - 1] : 0.0) - top);
  for (double& w : s.weight) w /= sum;
  s.log_kernel_norm = -std::log(kernel * step) - 0.9189385332046727418;
  return s;
}

DistancePriorTerms DistancePriorShape::histogram_at(double mu, int& lo, int& hi, double* r,
                                                    double& r_scale) const {
  // In grid units z = (mu - c_0) / h; with kappa >= 0.5 a bin 10 or more steps away adds
  // exp(-50) of what the nearest does (times their weights' ratio), so only kHistogramReach
  // each side count.
  const int bins = static_cast<int>(weight.size());
  const double z = (mu - start) / step;
  const int nearest = std::clamp(static_cast<int>(std::lround(z)), 0, bins - 1);
  lo = std::max(0, nearest - kHistogramReach), hi = std::min(bins - 1, nearest + kHistogramReach);
  // Gaussians relative to the nearest bin's, outwards from it so that nothing underflows:
  // with q = 1 / kappa^2, e_(j+1) / e_j = exp(q (z - j - 1/2)), e_(j-1) / e_j =
  // exp(q (j - z - 1/2)). The two sides are summed apart (independent chains) with the moments
  // of j - z in the same pass.
  const double q = kernel_q, decay = kernel_decay;
  const double* w = weight.data();
  const double d0 = nearest - z;
  const double t0 = r[nearest - lo] = w[nearest];
  double up0 = t0, up1 = t0 * d0, up2 = t0 * d0 * d0, dn0 = 0, dn1 = 0, dn2 = 0;
  double e_up = 1.0, ratio_up = std::exp(q * (-d0 - 0.5)), e_dn = 1.0,
         ratio_dn = std::exp(q * (d0 - 0.5));
  for (int k = 1; k <= kHistogramReach; ++k) {
    e_up *= ratio_up, ratio_up *= decay;
    e_dn *= ratio_dn, ratio_dn *= decay;
    if (nearest + k <= hi) {
      const double t = r[nearest + k - lo] = w[nearest + k] * e_up, d = d0 + k;
      up0 += t, up1 += t * d, up2 += t * d * d;
    }
    if (nearest - k >= lo) {
      const double t = r[nearest - k - lo] = w[nearest - k] * e_dn, d = d0 - k;
      dn0 += t, dn1 += t * d, dn2 += t * d * d;
    }
  }
  const double total = up0 + dn0, inv = 1.0 / total;
  const double first = (up1 + dn1) * inv, second = (up2 + dn2) * inv;
  r_scale = inv;
  DistancePriorTerms t{};
  // With s = kappa h: d ln p / d mu = sum r_j (c_j - mu) / s^2, and its derivative the
  // responsibilities' variance of (c_j - mu) / s^2 less 1 / s^2.
  const double h_q = q / step;
  t.log_density = std::log(total) - 0.5 * q * d0 * d0 + log_kernel_norm;
  t.d_mu = first * h_q;
  t.d2_mu = (second - first * first) * h_q * h_q - h_q / step;
  return t;
}

// ln p(mu) = (k+1) ln(d/L) - (d/L)^a - lnGamma((k+1)/a) + ln a + ln(ln10/5).
DistancePriorTerms DistancePriorShape::at(double mu, double* d_bins, double scale) const {
  if (histogram) {
    int lo = 0, hi = 0;
    double r[kHistogramWindow], r_scale = 0;
    DistancePriorTerms t = histogram_at(mu, lo, hi, r, r_scale);
    if (d_bins) {
      for (int j = std::max(lo, 1); j <= hi; ++j) d_bins[j - 1] += scale * r_scale * r[j - lo];
      for (std::size_t j = 1; j < weight.size(); ++j) d_bins[j - 1] -= scale * weight[j];
    }
    return t;
  }
  const double log_ratio = kC * mu - 2.0 * kLn10 - log_scale;  // ln(d / L)
  const double u = std::exp(exponent * log_ratio);             // (d / L)^a
  const double k1 = power + 1.0;
  DistancePriorTerms t;
  t.log_density = k1 * log_ratio - u + constant;
  t.d_mu = kC * (k1 - exponent * u);
  t.d2_mu = -kC * kC * exponent * exponent * u;
  t.d_log_scale = exponent * u - k1;
  t.d_power = log_ratio - digamma_shape / exponent;
  t.d_exponent = -u * log_ratio + digamma_shape * k1 / (exponent * exponent) + 1.0 / exponent;
  return t;
}

}  // namespace rungcal
