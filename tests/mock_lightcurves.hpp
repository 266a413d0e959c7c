// SPDX-License-Identifier: MIT
// Simulated light curves with known truth, shared by the tests and the light-curve bench.
// Invented data: only for simulations with known truth.
#pragma once

#include <algorithm>
#include <cmath>
#include <numbers>
#include <string>
#include <vector>

#include "rungcal/core/random.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"

namespace rungcal::test {

// A sine-series light curve m = m0 + sum_k A_k sin(2 pi k (t - t0) / P + phi_k).
struct MockCurve {
  double period_d = 10;
  double t0 = 2460000.0;
  double m0 = 14.0;
  std::vector<double> amplitude = {0.30, 0.12, 0.05};  // A_1..A_K
  std::vector<double> phase = {0.4, 2.0, 4.1};         // phi_1..phi_K, radians

  double magnitude(double t) const {
    double m = m0;
    for (std::size_t k = 0; k < amplitude.size(); ++k)
      m += amplitude[k] *
           std::sin(2 * std::numbers::pi * static_cast<double>(k + 1) * (t - t0) / period_d +
                    phase[k]);
    return m;
  }
};

// Epochs in observing seasons: `seasons` blocks of `season_days`, one a year, uneven
// within each block.
inline std::vector<double> mock_epochs(Random& rng, int n, int seasons = 4,
                                       double season_days = 160, double start = 2460000.0) {
  std::vector<double> t;
  for (int i = 0; i < n; ++i)
    t.push_back(start +
                365.25 * static_cast<double>(rng.below(static_cast<std::uint64_t>(seasons))) +
                rng.uniform(0, season_days));
  std::sort(t.begin(), t.end());
  return t;
}

inline TimeSeries mock_series(const MockCurve& c, const std::vector<double>& times, double error,
                              Random& rng) {
  TimeSeries s;
  for (double t : times) {
    s.t.push_back(t);
    s.y.push_back(c.magnitude(t) + rng.normal(0, error));
    s.dy.push_back(error);
  }
  return s;
}

// A Cepheid-like star in V, I, Ks: amplitudes scale 1, 0.6, 0.35 with one shape.
struct MockStar {
  StarSeries series;
  double period_d = 0;
  std::vector<MockCurve> curves;  // per band, as in series.bands
};

inline MockStar mock_cepheid(Random& rng, double period_d,
                             const std::vector<int>& epochs = {60, 40, 25}, double error = 0.012,
                             int seasons = 4) {
  MockStar star;
  star.period_d = period_d;
  star.series.id = "MOCK";
  const char* bands[] = {"V", "I", "Ks"};
  const double scale[] = {1.0, 0.6, 0.35};
  const double a1 = rng.uniform(0.15, 0.40), r21 = rng.uniform(0.3, 0.5),
               r31 = rng.uniform(0.1, 0.3);
  const double p1 = rng.uniform(0, 2 * std::numbers::pi), p2 = rng.uniform(0, 2 * std::numbers::pi),
               p3 = rng.uniform(0, 2 * std::numbers::pi);
  const double t0 = 2460000.0 + rng.uniform(0, period_d);
  for (std::size_t b = 0; b < epochs.size() && b < 3; ++b) {
    MockCurve c;
    c.period_d = period_d;
    c.t0 = t0;
    c.m0 = 13.0 - static_cast<double>(b) * 0.7;
    c.amplitude = {scale[b] * a1, scale[b] * a1 * r21, scale[b] * a1 * r31};
    c.phase = {p1, p2, p3};
    std::vector<double> t = mock_epochs(rng, epochs[b], seasons);
    star.series.bands.push_back(bands[b]);
    star.series.series.push_back(mock_series(c, t, error, rng));
    star.curves.push_back(c);
  }
  return star;
}

}  // namespace rungcal::test
