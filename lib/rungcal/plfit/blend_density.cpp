// SPDX-License-Identifier: MIT
#include "rungcal/plfit/blend_density.hpp"

#include <cmath>
#include <numbers>

namespace rungcal {
namespace {

constexpr double kLog2Pi = 1.8378770664093454836;

// ln Phi(z), psi = phi(z) / Phi(z) and z + psi, without underflow or cancellation. Below
// z = -30, erfc(-z / sqrt 2) nears its underflow: Phi(z) = phi(z) / (-z) S(z) with the
// asymptotic series S = 1 - 1/z^2 + 3/z^4 - ... (Abramowitz & Stegun 26.2.12), whose terms
// to z^-12 leave a relative error below 1e-16 there.
void normal_log_cdf(double z, double& log_cdf, double& psi, double& z_plus_psi) {
  if (z > -30.0) {
    const double cdf = 0.5 * std::erfc(-z / std::numbers::sqrt2);
    log_cdf = std::log(cdf);
    psi = std::exp(-0.5 * z * z - 0.5 * kLog2Pi - log_cdf);
    z_plus_psi = z + psi;
    return;
  }
  const double u = 1.0 / (z * z);
  // S - 1 = sum_k (-1)^k (2k - 1)!! u^k, k = 1..6
  const double s_minus_1 =
      u * (-1.0 + u * (3.0 + u * (-15.0 + u * (105.0 + u * (-945.0 + u * 10395.0)))));
  const double S = 1.0 + s_minus_1;
  log_cdf = -0.5 * z * z - std::log(-z) - 0.5 * kLog2Pi + std::log(S);
  psi = -z / S;
  z_plus_psi = z * s_minus_1 / S;
}

}  // namespace

BlendDensity blend_log_density(double r, double var, double scale) {
  const double lambda = 1.0 / scale, sd = std::sqrt(var);
  const double z = -(r + lambda * var) / sd;
  double log_cdf = 0, psi = 0, z_plus_psi = 0;
  normal_log_cdf(z, log_cdf, psi, z_plus_psi);
  BlendDensity b;
  b.log_density = -std::log(scale) + lambda * r + 0.5 * lambda * lambda * var + log_cdf;
  b.d_r = lambda - psi / sd;
  b.d2_r = -psi * z_plus_psi / var;
  b.d_var = 0.5 * lambda * lambda + psi * (r / var - lambda) / (2.0 * sd);
  b.d_scale = -lambda * lambda * (scale + r + lambda * var - psi * sd);
  return b;
}

namespace {

// Far in the lower tail (x = -z > 5) A = z + psi and B = 1 - psi A cancel to 1/x and 1/x^2
// of terms near x, losing x^2 of erfc's relative accuracy (4e-11 in ln A at z = -30).
// Laplace's continued fraction for the Mills ratio (e.g. Abramowitz & Stegun 26.2.14,
// evaluated backwards) gives them without a difference: with C_k = x + k / C_(k+1),
// psi = C_1, A = 1 / C_2 and B = (2 / C_3 - 1 / C_2) / C_2. 80 levels: converged to
// rounding for x >= 5.
void mean_excess_far_tail(double x, double& psi, double& a, double& b) {
  double c = x, c3 = x, c2 = x;
  for (int k = 80; k >= 1; --k) {
    c = x + k / c;
    if (k == 3) c3 = c;
    if (k == 2) c2 = c;
  }
  psi = c, a = 1.0 / c2, b = (2.0 / c3 - 1.0 / c2) / c2;
}

}  // namespace

BlendDensity blend_rising_log_density(double r, double var, double mean) {
  const double theta = 0.5 * mean, lambda = 1.0 / theta, sd = std::sqrt(var);
  const BlendDensity e = blend_log_density(r, var, theta);
  const double z = -(r + lambda * var) / sd;
  double log_cdf = 0, psi = 0, a = 0;
  normal_log_cdf(z, log_cdf, psi, a);
  double b = 1.0 - psi * a;
  if (z < -5.0) mean_excess_far_tail(-z, psi, a, b);
  const double h1 = b / a, h2 = (psi * (a * a - b) * a - b * b) / (a * a);
  BlendDensity d;
  d.log_density = e.log_density + std::log(lambda * sd) + std::log(a);
  d.d_r = e.d_r - h1 / sd;
  d.d2_r = e.d2_r + h2 / var;
  d.d_var = e.d_var + 0.5 / var + h1 * (r / var - lambda) / (2.0 * sd);
  d.d_scale = 0.5 * (e.d_scale - lambda + h1 * lambda * lambda * sd);
  return d;
}

}  // namespace rungcal

namespace rungcal {

ColouredBlendDensity coloured_blend_log_density(double r, double var, double mean,
                                                const BlendColour& colour, bool rising) {
  const double k_rise = rising ? 1.0 : 0.0;
  const double lambda = (1.0 + k_rise) / mean, lam = lambda + colour.tilt;
  const double kappa = colour.kappa, curv = colour.curvature;
  const double A = kappa * kappa / var + curv, root_a = std::sqrt(A);
  const double B = kappa * r / var + lam, z = -B / root_a;
  double log_cdf = 0, psi = 0, m1 = 0;
  normal_log_cdf(z, log_cdf, psi, m1);
  double b1 = 1.0 - psi * m1;
  if (z < -5.0) mean_excess_far_tail(-z, psi, m1, b1);
  // H(z) = z^2/2 + ln Phi(z) [+ ln(z + psi) when rising]: H' = z + g1, H'' = 1 + g2, with
  // g1 and g2 kept apart from z and 1 (they are tiny on the bright side).
  double g1 = psi, g2 = -psi * m1;
  ColouredBlendDensity d;
  d.log_density = (1.0 + k_rise) * std::log(lambda) - 0.5 * std::log(var * A) +
                  (2.0 * kappa * r * lam + lam * lam * var - curv * r * r) / (2.0 * var * A) +
                  log_cdf;
  if (rising) {
    d.log_density += std::log(m1) - 0.5 * std::log(A);
    g1 += b1 / m1;
    g2 += (psi * (m1 * m1 - b1) * m1 - b1 * b1) / (m1 * m1);
  }
  const double h1 = z + g1;
  const double z_r = -kappa / (var * root_a);
  const double z_v = kappa * r / (var * var * root_a) + z * kappa * kappa / (2.0 * A * var * var);
  const double z_kappa = -r / (var * root_a) - z * kappa / (var * A);
  const double gap = r * curv - kappa * lam;  // r A - B kappa
  d.d_r = -gap / (var * A) + g1 * z_r;
  d.d2_r = -curv / (var * A) + g2 * z_r * z_r;
  d.d_var = -0.5 / var + gap * gap / (2.0 * var * var * A * A) +
            (1.0 + k_rise) * kappa * kappa / (2.0 * A * var * var) + g1 * z_v;
  d.d_scale = -(1.0 + k_rise) / mean + lambda * h1 / (mean * root_a);
  d.d_kappa = -(1.0 + k_rise) * kappa / (var * A) + h1 * z_kappa;
  d.d_curvature = -(1.0 + k_rise) / (2.0 * A) - h1 * z / (2.0 * A);
  d.d_tilt = -h1 / root_a;
  return d;
}

}  // namespace rungcal
