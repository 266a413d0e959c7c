// SPDX-License-Identifier: MIT
#include "rungcal/extinction/extinction.hpp"

#include <array>
#include <cmath>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

// Horner evaluation of sum c[i] y^i.
template <std::size_t N>
double polynomial(const std::array<double, N>& c, double y) {
  double v = 0.0;
  for (std::size_t i = N; i-- > 0;) v = v * y + c[i];
  return v;
}

struct AB {
  double a, b;
};

// CCM89 (and O'Donnell 1994) a(x), b(x); optical polynomials chosen by the caller.
AB cardelli_ab(double x, bool odonnell) {
  if (x < 1.1) {
    double p = std::pow(x, 1.61);
    return {0.574 * p, -0.527 * p};
  }
  if (x < 3.3) {
    double y = x - 1.82;
    if (odonnell) {
      static constexpr std::array<double, 9> a = {1.0,    0.104,  -0.609, 0.701, 1.137,
                                                  -1.718, -0.827, 1.647,  -0.505};
      static constexpr std::array<double, 9> b = {0.0,    1.952, 2.908,   -3.989, -7.985,
                                                  11.102, 5.491, -10.805, 3.347};
      return {polynomial(a, y), polynomial(b, y)};
    }
    static constexpr std::array<double, 8> a = {1.0,     0.17699, -0.50447, -0.02427,
                                                0.72085, 0.01979, -0.77530, 0.32999};
    static constexpr std::array<double, 8> b = {0.0,      1.41338,  2.28305, 1.07233,
                                                -5.38434, -0.62251, 5.30260, -2.09002};
    return {polynomial(a, y), polynomial(b, y)};
  }
  if (x < 8.0) {
    double fa = 0.0, fb = 0.0;
    if (x > 5.9) {
      double u = x - 5.9;
      fa = -0.04473 * u * u - 0.009779 * u * u * u;
      fb = 0.2130 * u * u + 0.1207 * u * u * u;
    }
    return {1.752 - 0.316 * x - 0.104 / ((x - 4.67) * (x - 4.67) + 0.341) + fa,
            -3.090 + 1.825 * x + 1.206 / ((x - 4.62) * (x - 4.62) + 0.263) + fb};
  }
  double z = x - 8.0;
  return {-1.073 - 0.628 * z + 0.137 * z * z - 0.070 * z * z * z,
          13.670 + 4.257 * z - 0.420 * z * z + 0.374 * z * z * z};
}

// Fitzpatrick & Massa (1990) UV curve k(x) = E(x-V)/E(B-V) with Fitzpatrick 1999's
// R_V-dependent c1, c2 and fixed x0, gamma, c3, c4.
double fm_uv_k(double x, double r_v) {
  constexpr double x0 = 4.596, gamma = 0.99, c3 = 3.23, c4 = 0.41;
  double c2 = -0.824 + 4.717 / r_v;
  double c1 = 2.030 - 3.007 * c2;
  double x2 = x * x;
  double d = x2 / ((x2 - x0 * x0) * (x2 - x0 * x0) + x2 * gamma * gamma);
  double f = 0.0;
  if (x >= 5.9) {
    double u = x - 5.9;
    f = 0.5392 * u * u + 0.05644 * u * u * u;
  }
  return c1 + c2 * x + c3 * d + c4 * f;
}

// Natural cubic spline (zero second derivative at both ends) through (xs, ys), xs rising;
// the second derivatives come from the usual tridiagonal system (Thomas algorithm).
double natural_spline(const std::vector<double>& xs, const std::vector<double>& ys, double x) {
  const std::size_t n = xs.size();
  std::vector<double> h(n - 1), diag(n, 0.0), rhs(n, 0.0), m(n, 0.0);
  for (std::size_t i = 0; i + 1 < n; ++i) h[i] = xs[i + 1] - xs[i];
  for (std::size_t i = 1; i + 1 < n; ++i) {
    diag[i] = 2.0 * (h[i - 1] + h[i]);
    rhs[i] = 6.0 * ((ys[i + 1] - ys[i]) / h[i] - (ys[i] - ys[i - 1]) / h[i - 1]);
  }
  for (std::size_t i = 2; i + 1 < n; ++i) {
    double w = h[i - 1] / diag[i - 1];
    diag[i] -= w * h[i - 1];
    rhs[i] -= w * rhs[i - 1];
  }
  m[n - 2] = rhs[n - 2] / diag[n - 2];
  for (std::size_t i = n - 3; i >= 1; --i) m[i] = (rhs[i] - h[i] * m[i + 1]) / diag[i];
  std::size_t k = 0;
  while (k + 2 < n && x > xs[k + 1]) ++k;
  double a = (xs[k + 1] - x) / h[k], b = (x - xs[k]) / h[k];
  return a * ys[k] + b * ys[k + 1] +
         ((a * a * a - a) * m[k] + (b * b * b - b) * m[k + 1]) * h[k] * h[k] / 6.0;
}

// Fitzpatrick 1999 A_lambda / E(B-V).
double fitzpatrick_a_over_ebv(double x, double r_v) {
  constexpr double kUvCut = 1e4 / 2700.0;
  if (x >= kUvCut) return fm_uv_k(x, r_v) + r_v;
  const double s = r_v / 3.1;
  std::vector<double> xs = {0.0,          1e4 / 26500.0, 1e4 / 12200.0, 1e4 / 6000.0, 1e4 / 5470.0,
                            1e4 / 4670.0, 1e4 / 4110.0,  1e4 / 2700.0,  1e4 / 2600.0};
  std::vector<double> ys = {
      0.0,
      0.26469 * s,
      0.82925 * s,
      -4.22809e-01 + 1.00270 * r_v + 2.13572e-04 * r_v * r_v,
      -5.13540e-02 + 1.00216 * r_v - 7.35778e-05 * r_v * r_v,
      7.00127e-01 + 1.00184 * r_v - 3.32598e-05 * r_v * r_v,
      1.19456 + 1.01707 * r_v - 5.46959e-03 * r_v * r_v + 7.97809e-04 * r_v * r_v * r_v -
          4.45636e-05 * r_v * r_v * r_v * r_v,
      fm_uv_k(xs[7], r_v) + r_v,
      fm_uv_k(xs[8], r_v) + r_v,
  };
  return natural_spline(xs, ys, x);
}

}  // namespace

WavelengthRange law_range(ExtinctionLaw law) {
  switch (law) {
    case ExtinctionLaw::kCCM89:
    case ExtinctionLaw::kOD94:
      return {1000.0, 1e4 / 0.3};
    case ExtinctionLaw::kF99:
      return {910.0, 60000.0};
  }
  return {0, 0};
}

double extinction_ratio(ExtinctionLaw law, double wavelength_aa, double r_v) {
  if (!(r_v > 0.0) || !std::isfinite(r_v))
    throw InputError({}, "config_value", fmt::format("R_V = {} must be a positive number", r_v));
  WavelengthRange range = law_range(law);
  if (!(wavelength_aa >= range.min_aa && wavelength_aa <= range.max_aa))
    throw InputError(
        {}, "outside_law_range",
        fmt::format("{} A is outside the {} law's range, {:.0f} to {:.0f} A", wavelength_aa,
                    kExtinctionLawNames.name(law), range.min_aa, range.max_aa));
  const double x = 1e4 / wavelength_aa;
  switch (law) {
    case ExtinctionLaw::kCCM89: {
      AB ab = cardelli_ab(x, false);
      return ab.a + ab.b / r_v;
    }
    case ExtinctionLaw::kOD94: {
      AB ab = cardelli_ab(x, true);
      return ab.a + ab.b / r_v;
    }
    case ExtinctionLaw::kF99:
      return fitzpatrick_a_over_ebv(x, r_v) / r_v;
  }
  return 0.0;
}

}  // namespace rungcal
