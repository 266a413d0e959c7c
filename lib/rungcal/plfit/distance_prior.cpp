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
      inv2 * (1.0 / 12 - inv2 * (1.0 / 120 - inv2 * (1.0 / 252 - inv2 * (1.0 / 240 - inv2 * (1.0 / 132)))));
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

DistancePriorShape DistancePriorShape::make_histogram(double start, double step, const double* log_weights, int bins) {
  DistancePriorShape s;
  s.histogram = true;
  s.start = start;
  s.step = step;
  s.weight.assign(static_cast<std::size_t>(bins), 1.0);
  double top = 0;
  for (int j = 1; j < bins; ++j) top = std::max(top, log_weights[j - 1]);
  double sum = 0;
  for (int j = 0; j < bins; ++j) sum += s.weight[static_cast<std::size_t>(j)] = std::exp((j ? log_weights[j - 1] : 0.0) - top);
  for (double& w : s.weight) w /= sum;
  return s;
}

// ln p(mu) = (k+1) ln(d/L) - (d/L)^a - lnGamma((k+1)/a) + ln a + ln(ln10/5).
DistancePriorTerms DistancePriorShape::at(double mu, double* d_bins, double scale) const {
  if (histogram) {
    // In grid units z = (mu - c_0) / h; bins beyond 12 of the nearest add nothing in double.
    const int bins = static_cast<int>(weight.size());
    const double z = (mu - start) / step;
    const int nearest = std::clamp(static_cast<int>(std::lround(z)), 0, bins - 1);
    const int lo = std::max(0, nearest - 12), hi = std::min(bins - 1, nearest + 12);
    // Gaussians relative to the nearest bin's, by the recurrence e_(j+1) = e_j exp(z - j - 1/2).
    const double ref = 0.5 * (z - nearest) * (z - nearest);
    double e = std::exp(ref - 0.5 * (z - lo) * (z - lo)), ratio = std::exp(z - lo - 0.5);
    double p[32], total = 0, first = 0, second = 0;
    for (int j = lo; j <= hi; ++j) {
      p[j - lo] = weight[static_cast<std::size_t>(j)] * e;
      total += p[j - lo];
      e *= ratio;
      ratio *= 0.36787944117144233;  // exp(-1)
    }
    for (int j = lo; j <= hi; ++j) {
      const double r = p[j - lo] / total, dz = j - z;
      first += r * dz;
      second += r * (dz * dz - 1.0);
      if (d_bins && j > 0) d_bins[j - 1] += scale * r;
    }
    if (d_bins)
      for (int j = 1; j < bins; ++j) d_bins[j - 1] -= scale * weight[static_cast<std::size_t>(j)];
    DistancePriorTerms t{};
    t.log_density = std::log(total) - ref - std::log(step) - 0.9189385332046727418;  // ln sqrt(2 pi)
    t.d_mu = first / step;
    t.d2_mu = (second - first * first) / (step * step);
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
