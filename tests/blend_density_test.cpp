// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/plfit/blend_density: the blend components' densities against their
// definitions (numerical convolutions), their moments, derivatives and log-concavity.
#include "rungcal/plfit/blend_density.hpp"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <numbers>
#include <utility>

namespace rungcal {
namespace {

// A blend density's exact derivatives against central differences (step 1e-5), and
// d2/dr2 < 0 (log-concave); tol_d2 for d2/dr2, whose differences are of a derivative.
void expect_derivatives_and_log_concavity(BlendDensity (*density)(double, double, double), double r,
                                          double var, double scale, double tol_d2) {
  const BlendDensity b = density(r, var, scale);
  const double h = 1e-5;
  auto at = [&](double dr, double dv, double ds) { return density(r + dr, var + dv, scale + ds); };
  EXPECT_NEAR(b.d_r, (at(h, 0, 0).log_density - at(-h, 0, 0).log_density) / (2 * h),
              1e-6 * std::max(1.0, std::abs(b.d_r)))
      << r;
  EXPECT_NEAR(b.d2_r, (at(h, 0, 0).d_r - at(-h, 0, 0).d_r) / (2 * h),
              tol_d2 * std::max(1.0, std::abs(b.d2_r)))
      << r;
  EXPECT_NEAR(b.d_var, (at(0, h, 0).log_density - at(0, -h, 0).log_density) / (2 * h),
              1e-5 * std::max(1.0, std::abs(b.d_var)))
      << r;
  EXPECT_NEAR(b.d_scale, (at(0, 0, h).log_density - at(0, 0, -h).log_density) / (2 * h),
              1e-6 * std::max(1.0, std::abs(b.d_scale)))
      << r;
  EXPECT_LT(b.d2_r, 0.0) << "log-concave at " << r;
}

// The blend component's density against its definition, the convolution of N(0, V) with a
// one-sided exponential brightening: int_0^inf (1/s) exp(-b/s) N(r + b | 0, V) db by the
// midpoint rule; normalised; its derivatives against central differences, on both sides of
// the switch to the asymptotic series (z = -30) and continuous across it.
TEST(BlendDensity, ExponentialDensityIsTheConvolutionOfTheMemberGaussianWithAnExponential) {
  for (auto [var, scale] : {std::pair{0.04, 0.5}, std::pair{0.0064, 0.3}, std::pair{0.09, 0.05}}) {
    for (double r : {-2.0, -0.6, -0.1, 0.0, 0.15, 0.5}) {
      double sum = 0;
      const double db = 1e-4;
      for (double b = 0.5 * db; b < 40 * scale + 20 * std::sqrt(var); b += db)
        sum += std::exp(-b / scale) / scale * std::exp(-0.5 * (r + b) * (r + b) / var) /
               std::sqrt(2 * std::numbers::pi * var) * db;
      EXPECT_NEAR(std::exp(blend_log_density(r, var, scale).log_density), sum,
                  2e-6 * std::max(1.0, sum))
          << r;
    }
    double total = 0;
    for (double r = -40; r < 5; r += 1e-4)
      total += std::exp(blend_log_density(r, var, scale).log_density) * 1e-4;
    EXPECT_NEAR(total, 1.0, 1e-6) << var << " " << scale;
  }
  const double var = 0.04, scale = 0.5, sd = 0.2;
  const double r_switch = 30.0 * sd - var / scale;  // z = -30
  for (double r : {-3.0, -0.2, 0.3, 2.0, r_switch - 0.05, r_switch + 0.05, 12.0})
    expect_derivatives_and_log_concavity(blend_log_density, r, var, scale, 1e-6);
  const BlendDensity below = blend_log_density(r_switch - 1e-9, var, scale);
  EXPECT_NEAR(blend_log_density(r_switch + 1e-9, var, scale).log_density - below.log_density,
              2e-9 * below.d_r, 1e-12);
}

// The rising blend density against its definition, the convolution of N(0, V) with a
// Gamma(shape 2, mean s) brightening: int_0^inf b exp(-b / t) / t^2 N(r + b | 0, V) db,
// t = s / 2, by the midpoint rule; normalised; its mean brightening is s (the first moment
// of -r); derivatives against central differences on both sides of the asymptotic series
// (z = -30) and continuous across it; log-concave.
TEST(BlendDensity, RisingDensityIsTheConvolutionOfTheMemberGaussianWithAGamma2) {
  for (auto [var, mean] : {std::pair{0.04, 0.5}, std::pair{0.0064, 0.3}, std::pair{0.09, 0.1}}) {
    const double t = 0.5 * mean;
    for (double r : {-2.0, -0.6, -0.1, 0.0, 0.15, 0.5}) {
      double sum = 0;
      const double db = 1e-4;
      for (double b = 0.5 * db; b < 60 * t + 20 * std::sqrt(var); b += db)
        sum += b * std::exp(-b / t) / (t * t) * std::exp(-0.5 * (r + b) * (r + b) / var) /
               std::sqrt(2 * std::numbers::pi * var) * db;
      EXPECT_NEAR(std::exp(blend_rising_log_density(r, var, mean).log_density), sum,
                  2e-6 * std::max(1.0, sum))
          << r;
    }
    double total = 0, first = 0;
    for (double r = -40; r < 5; r += 1e-4) {
      const double p = std::exp(blend_rising_log_density(r, var, mean).log_density) * 1e-4;
      total += p, first -= r * p;
    }
    EXPECT_NEAR(total, 1.0, 1e-6) << var << " " << mean;
    EXPECT_NEAR(first, mean, 1e-5) << var << " " << mean;
  }
  const double var = 0.04, mean = 0.5, sd = 0.2;
  const double r_switch = 30.0 * sd - var / (0.5 * mean);  // z = -30
  for (double r : {-3.0, -0.2, 0.3, 0.95, 1.05, 2.0, r_switch - 0.05, r_switch + 0.05, 12.0})
    expect_derivatives_and_log_concavity(blend_rising_log_density, r, var, mean, 1e-5);
  // Continuous where the erfc form hands over to the continued fraction (z = -5) and the
  // Phi series to its asymptotic one (z = -30).
  for (double z_switch : {-5.0, -30.0}) {
    const double r_at = -z_switch * sd - var / (0.5 * mean);
    const BlendDensity below = blend_rising_log_density(r_at - 1e-9, var, mean);
    const BlendDensity above = blend_rising_log_density(r_at + 1e-9, var, mean);
    EXPECT_NEAR(above.log_density - below.log_density, 2e-9 * below.d_r, 1e-12) << z_switch;
    EXPECT_NEAR(above.d_r - below.d_r, 2e-9 * below.d2_r, 1e-10) << z_switch;
  }
}

// The coloured blend density (the joint fit's: a brightening kappa b of the reduced magnitude
// and a colour residual -t b - D b^2 / 2) against its definition by the midpoint rule,
//   lambda^(1+k) / k! int_0^inf b^k N(r + kappa b | 0, V) exp(-(lambda + t) b - D b^2 / 2) db;
// equal to the grey densities at kappa = 1, D = t = 0; each derivative against central
// differences; log-concave in r.
TEST(BlendDensity, ColouredDensityIsItsDefiningIntegralAndGreyAtUnitRatio) {
  struct Case {
    double var, mean;
    BlendColour colour;
  };
  const Case cases[] = {{0.04, 0.5, {1.3, 2.0, -0.4}},
                        {0.0064, 0.3, {0.7, 12.0, 1.5}},
                        {0.09, 0.2, {1.0, 0.5, 0.0}},
                        {0.01, 0.4, {2.2, 0.0, 3.0}}};
  for (const Case& c : cases)
    for (bool rising : {false, true}) {
      const double lambda = (rising ? 2.0 : 1.0) / c.mean;
      for (double r : {-2.0, -0.6, -0.1, 0.0, 0.15, 0.5}) {
        double sum = 0;
        const double db = 1e-4;
        for (double b = 0.5 * db; b < 80 / lambda + 20 * std::sqrt(c.var); b += db) {
          const double y = r + c.colour.kappa * b;
          sum += (rising ? lambda * lambda * b : lambda) *
                 std::exp(-(lambda + c.colour.tilt) * b - 0.5 * c.colour.curvature * b * b) *
                 std::exp(-0.5 * y * y / c.var) / std::sqrt(2 * std::numbers::pi * c.var) * db;
        }
        const double ours =
            std::exp(coloured_blend_log_density(r, c.var, c.mean, c.colour, rising).log_density);
        EXPECT_NEAR(ours, sum, 2e-6 * std::max(1.0, sum)) << r << " rising " << rising;
      }
      for (double r : {-3.0, -0.4, 0.1, 0.8, 4.0}) {
        const ColouredBlendDensity d =
            coloured_blend_log_density(r, c.var, c.mean, c.colour, rising);
        auto at = [&](double dr, double dv, double ds, double dk, double dd, double dt) {
          BlendColour k{c.colour.kappa + dk, c.colour.curvature + dd, c.colour.tilt + dt};
          return coloured_blend_log_density(r + dr, c.var + dv, c.mean + ds, k, rising);
        };
        const double h = 1e-6;
        auto diff = [&](double ColouredBlendDensity::*field, int which) {
          double up[6] = {0, 0, 0, 0, 0, 0}, down[6] = {0, 0, 0, 0, 0, 0};
          up[which] = h, down[which] = -h;
          return (at(up[0], up[1], up[2], up[3], up[4], up[5]).*field -
                  at(down[0], down[1], down[2], down[3], down[4], down[5]).*field) /
                 (2 * h);
        };
        using D = ColouredBlendDensity;
        const std::pair<double, double> checks[] = {
            {d.d_r, diff(&D::log_density, 0)},     {d.d2_r, diff(&D::d_r, 0)},
            {d.d_var, diff(&D::log_density, 1)},   {d.d_scale, diff(&D::log_density, 2)},
            {d.d_kappa, diff(&D::log_density, 3)}, {d.d_curvature, diff(&D::log_density, 4)},
            {d.d_tilt, diff(&D::log_density, 5)}};
        for (std::size_t k = 0; k < std::size(checks); ++k)
          EXPECT_NEAR(checks[k].first, checks[k].second,
                      2e-5 * std::max(1.0, std::abs(checks[k].second)))
              << "derivative " << k << " at r = " << r << " rising " << rising;
        EXPECT_LT(d.d2_r, 0.0) << "log-concave at " << r;
      }
    }
  for (double r : {-2.0, -0.3, 0.0, 0.4, 3.0, 9.0}) {
    const ColouredBlendDensity e = coloured_blend_log_density(r, 0.04, 0.5, {}, false);
    const BlendDensity grey = blend_log_density(r, 0.04, 0.5);
    const ColouredBlendDensity er = coloured_blend_log_density(r, 0.04, 0.5, {}, true);
    const BlendDensity grey_r = blend_rising_log_density(r, 0.04, 0.5);
    for (auto [ours, theirs] : {std::pair{e.log_density, grey.log_density},
                                {e.d_r, grey.d_r},
                                {e.d2_r, grey.d2_r},
                                {e.d_var, grey.d_var},
                                {e.d_scale, grey.d_scale},
                                {er.log_density, grey_r.log_density},
                                {er.d_r, grey_r.d_r},
                                {er.d2_r, grey_r.d2_r},
                                {er.d_var, grey_r.d_var},
                                {er.d_scale, grey_r.d_scale}})
      EXPECT_NEAR(ours, theirs, 1e-9 * std::max(1.0, std::abs(theirs))) << r;
  }
}

}  // namespace
}  // namespace rungcal
