// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/periodogram.hpp"

#include <algorithm>
#include <cmath>
#include <numbers>
#include <stdexcept>

#include "rungcal/core/simd.hpp"

namespace rungcal {
namespace {

constexpr double kTwoPi = 2.0 * std::numbers::pi;
// Frequencies between exact re-seeds of the rotation recurrence: its rounding error grows
// about linearly with the steps, ~1e-13 after this many, far below what any test resolves.
constexpr std::size_t kReseedEvery = 2048;
constexpr int kMaxHarmonics = 6;

// One series prepared for the sums: normalised weights, weighted-centred values, and times
// measured from their weighted mean (smaller phases, smaller rounding).
struct Prepared {
  std::vector<double> w, wy, t;
  double yy = 0;      // sum w (y - <y>)^2 with normalised w
  double weight = 0;  // sum 1/sigma^2: a band's share of the combined chi^2
};

Prepared prepare(const TimeSeries& s) {
  if (s.t.size() != s.y.size() || s.t.size() != s.dy.size())
    throw std::invalid_argument("time series columns differ in length");
  Prepared p;
  const std::size_t n = s.size();
  p.w.resize(n);
  for (std::size_t i = 0; i < n; ++i) {
    if (!(s.dy[i] > 0)) throw std::invalid_argument("time series error must be positive");
    p.w[i] = 1.0 / (s.dy[i] * s.dy[i]);
    p.weight += p.w[i];
  }
  double ybar = 0, tbar = 0;
  for (std::size_t i = 0; i < n; ++i) {
    p.w[i] /= p.weight;
    ybar += p.w[i] * s.y[i];
    tbar += p.w[i] * s.t[i];
  }
  p.wy.resize(n);
  p.t.resize(n);
  for (std::size_t i = 0; i < n; ++i) {
    double d = s.y[i] - ybar;
    p.wy[i] = p.w[i] * d;
    p.yy += p.w[i] * d * d;
    p.t[i] = s.t[i] - tbar;
  }
  return p;
}

// cos and sin of harmonic m at each epoch, advanced one grid step per frequency by a
// rotation through m * step * t.
struct HarmonicState {
  std::vector<double> c, s, step_c, step_s;
};

void seed_harmonic(HarmonicState& h, const std::vector<double>& t, double frequency, double step,
                   int m) {
  const std::size_t n = t.size();
  h.c.resize(n);
  h.s.resize(n);
  h.step_c.resize(n);
  h.step_s.resize(n);
  for (std::size_t i = 0; i < n; ++i) {
    double phase = std::fmod(kTwoPi * m * frequency * t[i], kTwoPi);
    h.c[i] = std::cos(phase);
    h.s[i] = std::sin(phase);
    double d = std::fmod(kTwoPi * m * step * t[i], kTwoPi);
    h.step_c[i] = std::cos(d);
    h.step_s[i] = std::sin(d);
  }
}

struct Sums {
  double c = 0, s = 0, yc = 0, ys = 0;
};

// Sums of w cos, w sin and w y cos, w y sin of one harmonic at the current frequency, then
// one rotation step. The hot loop of both periodograms.
RUNGCAL_VECTOR_CLONES
Sums sum_values_and_rotate(const double* __restrict w, const double* __restrict wy,
                           double* __restrict c, double* __restrict s, const double* __restrict cd,
                           const double* __restrict sd, std::size_t n) {
  double sc = 0, ss = 0, syc = 0, sys = 0;
#pragma omp simd reduction(+ : sc, ss, syc, sys)
  for (std::size_t i = 0; i < n; ++i) {
    const double ci = c[i], si = s[i];
    sc += w[i] * ci;
    ss += w[i] * si;
    syc += wy[i] * ci;
    sys += wy[i] * si;
    c[i] = ci * cd[i] - si * sd[i];
    s[i] = si * cd[i] + ci * sd[i];
  }
  return {sc, ss, syc, sys};
}

// The same without the value sums (the harmonics above K only enter the normal matrix).
RUNGCAL_VECTOR_CLONES
Sums sum_and_rotate(const double* __restrict w, double* __restrict c, double* __restrict s,
                    const double* __restrict cd, const double* __restrict sd, std::size_t n) {
  double sc = 0, ss = 0;
#pragma omp simd reduction(+ : sc, ss)
  for (std::size_t i = 0; i < n; ++i) {
    const double ci = c[i], si = s[i];
    sc += w[i] * ci;
    ss += w[i] * si;
    c[i] = ci * cd[i] - si * sd[i];
    s[i] = si * cd[i] + ci * sd[i];
  }
  return {sc, ss, 0.0, 0.0};
}

// The sums of the single-harmonic periodogram at one frequency (normalised weights).
struct GlsSums {
  double c = 0, s = 0, yc = 0, ys = 0, cc = 0,
         cs = 0;  // sum w cos, w sin, w y cos, w y sin, w cos^2, w cos sin
};

// GlsSums at two consecutive grid frequencies in one pass over the epochs, then two
// rotation steps: each epoch's state is loaded and stored once per pair, so the loop is
// bound by arithmetic rather than by memory traffic.
RUNGCAL_VECTOR_CLONES
void gls_sums_pair(const double* __restrict w, const double* __restrict wy, double* __restrict c,
                   double* __restrict s, const double* __restrict cd, const double* __restrict sd,
                   std::size_t n, GlsSums* out) {
  double c0 = 0, s0 = 0, yc0 = 0, ys0 = 0, cc0 = 0, cs0 = 0;
  double c1 = 0, s1 = 0, yc1 = 0, ys1 = 0, cc1 = 0, cs1 = 0;
#pragma omp simd reduction(+ : c0, s0, yc0, ys0, cc0, cs0, c1, s1, yc1, ys1, cc1, cs1)
  for (std::size_t i = 0; i < n; ++i) {
    const double wi = w[i], wyi = wy[i], ci = c[i], si = s[i], cdi = cd[i], sdi = sd[i];
    double wc = wi * ci;
    c0 += wc;
    s0 += wi * si;
    yc0 += wyi * ci;
    ys0 += wyi * si;
    cc0 += wc * ci;
    cs0 += wc * si;
    const double cn = ci * cdi - si * sdi, sn = si * cdi + ci * sdi;
    wc = wi * cn;
    c1 += wc;
    s1 += wi * sn;
    yc1 += wyi * cn;
    ys1 += wyi * sn;
    cc1 += wc * cn;
    cs1 += wc * sn;
    c[i] = cn * cdi - sn * sdi;
    s[i] = sn * cdi + cn * sdi;
  }
  out[0] = {c0, s0, yc0, ys0, cc0, cs0};
  out[1] = {c1, s1, yc1, ys1, cc1, cs1};
}

// Closed-form single-harmonic power, Zechmeister & Kuerster 2009 eqs. 5-20 (sum w = 1, so
// sum w sin^2 = 1 - sum w cos^2).
double gls_power_from_sums(const GlsSums& h, double yy) {
  const double cc = h.cc - h.c * h.c;
  const double ss = 1.0 - h.cc - h.s * h.s;
  const double cs = h.cs - h.c * h.s;
  const double d = cc * ss - cs * cs;
  if (!(d > 0) || !(yy > 0)) return 0.0;
  return (ss * h.yc * h.yc + cc * h.ys * h.ys - 2.0 * cs * h.yc * h.ys) / (yy * d);
}

// Single-harmonic power of one band at every grid frequency, two frequencies a pass.
std::vector<double> gls_sweep(const Prepared& p, const FrequencyGrid& grid) {
  static_assert(kReseedEvery % 2 == 0, "pairs must not straddle a re-seed");
  std::vector<double> power(grid.count, 0.0);
  HarmonicState h;
  GlsSums pair[2];
  for (std::size_t k = 0; k < grid.count; k += 2) {
    if (k % kReseedEvery == 0) seed_harmonic(h, p.t, grid.at(k), grid.step, 1);
    gls_sums_pair(p.w.data(), p.wy.data(), h.c.data(), h.s.data(), h.step_c.data(), h.step_s.data(),
                  p.t.size(), pair);
    power[k] = gls_power_from_sums(pair[0], p.yy);
    if (k + 1 < grid.count) power[k + 1] = gls_power_from_sums(pair[1], p.yy);
  }
  return power;
}

// chi^2 reduction (normalised weights) of a K-harmonic fit from the harmonic sums
// h[m] (m = 1..2K; h[0] unused): the normal matrix A of the basis 1, cos(kx), sin(kx) by the
// product-to-sum identities, e.g. sum w cos(ax) cos(bx) = (C_{a-b} + C_{a+b}) / 2; then
// r^T A^-1 r = |z|^2 with L z = r, A = L L^T (Cholesky; A is a normal matrix, positive
// definite unless the sampling cannot tell the terms apart, where the power is 0).
double chi2_reduction(const std::vector<Sums>& h, int k_max) {
  constexpr int kMax = 2 * kMaxHarmonics + 1;
  const int p = 2 * k_max + 1;
  auto cm = [&](int m) { return m == 0 ? 1.0 : h[static_cast<std::size_t>(std::abs(m))].c; };
  auto sm = [&](int m) {
    return m == 0 ? 0.0 : (m > 0 ? 1.0 : -1.0) * h[static_cast<std::size_t>(std::abs(m))].s;
  };
  double a[kMax][kMax];
  double r[kMax];
  a[0][0] = 1.0;
  r[0] = 0.0;  // values are weighted-centred
  for (int i = 1; i <= k_max; ++i) {
    const int ci = 2 * i - 1, si = 2 * i;
    a[ci][0] = cm(i);
    a[si][0] = sm(i);
    r[ci] = h[static_cast<std::size_t>(i)].yc;
    r[si] = h[static_cast<std::size_t>(i)].ys;
    for (int j = 1; j <= i; ++j) {  // the lower triangle is all Cholesky reads
      const int cj = 2 * j - 1, sj = 2 * j;
      a[ci][cj] = 0.5 * (cm(i - j) + cm(i + j));
      a[si][sj] = 0.5 * (cm(i - j) - cm(i + j));
      a[si][cj] = 0.5 * (sm(i + j) + sm(i - j));             // sum w sin(ix) cos(jx)
      if (j < i) a[ci][sj] = 0.5 * (sm(i + j) - sm(i - j));  // sum w cos(ix) sin(jx)
    }
  }
  double red = 0;
  for (int i = 0; i < p; ++i) {
    for (int j = 0; j <= i; ++j) {
      double v = a[i][j];
      for (int k = 0; k < j; ++k) v -= a[i][k] * a[j][k];
      if (i == j) {
        if (!(v > 1e-14)) return 0.0;
        a[i][i] = std::sqrt(v);
      } else {
        a[i][j] = v / a[j][j];
      }
    }
    double z = r[i];
    for (int k = 0; k < i; ++k) z -= a[i][k] * r[k];
    r[i] = z / a[i][i];  // r now holds z
    red += r[i] * r[i];
  }
  return std::isfinite(red) ? red : 0.0;
}

// Sweeps the grid for one band, calling sink(k, sums) at each frequency with the sums of
// harmonics 1..n_harmonics (values only for the first `with_values`): the multi-harmonic
// periodogram.
template <typename Sink>
void sweep_band(const Prepared& p, const FrequencyGrid& grid, int n_harmonics, int with_values,
                Sink&& sink) {
  std::vector<HarmonicState> state(static_cast<std::size_t>(n_harmonics) + 1);
  std::vector<Sums> sums(static_cast<std::size_t>(n_harmonics) + 1);
  const std::size_t n = p.t.size();
  for (std::size_t k = 0; k < grid.count; ++k) {
    if (k % kReseedEvery == 0)
      for (int m = 1; m <= n_harmonics; ++m)
        seed_harmonic(state[static_cast<std::size_t>(m)], p.t, grid.at(k), grid.step, m);
    for (int m = 1; m <= n_harmonics; ++m) {
      HarmonicState& h = state[static_cast<std::size_t>(m)];
      sums[static_cast<std::size_t>(m)] =
          m <= with_values ? sum_values_and_rotate(p.w.data(), p.wy.data(), h.c.data(), h.s.data(),
                                                   h.step_c.data(), h.step_s.data(), n)
                           : sum_and_rotate(p.w.data(), h.c.data(), h.s.data(), h.step_c.data(),
                                            h.step_s.data(), n);
    }
    sink(k, sums);
  }
}

void check_grid(const FrequencyGrid& grid) {
  if (grid.count == 0 || !(grid.first > 0) || !(grid.step > 0))
    throw std::invalid_argument("frequency grid must be positive and non-empty");
}

}  // namespace

FrequencyGrid frequency_grid(double baseline_d, double min_period_d, double max_period_d,
                             double oversampling) {
  if (!(baseline_d > 0) || !(min_period_d > 0) || !(max_period_d > min_period_d) ||
      !(oversampling > 0))
    throw std::invalid_argument(
        "frequency grid needs a positive baseline, 0 < min period < max period and oversampling > "
        "0");
  FrequencyGrid g;
  g.first = 1.0 / max_period_d;
  g.step = 1.0 / (oversampling * baseline_d);
  double span = 1.0 / min_period_d - g.first;
  g.count = static_cast<std::size_t>(std::floor(span / g.step + 1e-9)) + 1;
  return g;
}

std::vector<double> lomb_scargle_power(const TimeSeries& series, const FrequencyGrid& grid) {
  check_grid(grid);
  const Prepared p = prepare(series);
  return gls_sweep(p, grid);
}

std::vector<double> multiband_power(const std::vector<TimeSeries>& bands, const FrequencyGrid& grid,
                                    int harmonics) {
  check_grid(grid);
  if (harmonics < 1 || harmonics > kMaxHarmonics)
    throw std::invalid_argument("harmonics must be 1..6");
  std::vector<double> reduction(grid.count, 0.0);
  double chi2_0 = 0;
  for (const auto& band : bands) {
    const Prepared p = prepare(band);
    chi2_0 += p.weight * p.yy;
    if (harmonics == 1) {
      const std::vector<double> power = gls_sweep(p, grid);
      for (std::size_t k = 0; k < grid.count; ++k) reduction[k] += p.weight * p.yy * power[k];
    } else {
      sweep_band(p, grid, 2 * harmonics, harmonics, [&](std::size_t k, const std::vector<Sums>& h) {
        reduction[k] += p.weight * chi2_reduction(h, harmonics);
      });
    }
  }
  if (!(chi2_0 > 0)) return std::vector<double>(grid.count, 0.0);
  for (double& r : reduction) r = std::clamp(r / chi2_0, 0.0, 1.0);
  return reduction;
}

namespace {

struct FinePeak {
  double frequency = 0, power = 0;
};

// The best multi-harmonic power within +- half_width of f (65 frequencies).
FinePeak best_power_near(const std::vector<TimeSeries>& bands, double f, double half_width,
                         int harmonics) {
  constexpr std::size_t kPoints = 65;
  const FrequencyGrid fine{std::max(f - half_width, 0.5 * f), 2 * half_width / (kPoints - 1),
                           kPoints};
  const std::vector<double> p = multiband_power(bands, fine, harmonics);
  const auto best = std::max_element(p.begin(), p.end());
  return {fine.at(static_cast<std::size_t>(best - p.begin())), *best};
}

}  // namespace

double fundamental_frequency(const std::vector<TimeSeries>& bands, double f, double grid_step,
                             int harmonics, double max_frequency) {
  double chi2_0 = 0;
  std::size_t epochs = 0;
  for (const auto& band : bands) {
    const Prepared p = prepare(band);
    chi2_0 += p.weight * p.yy;
    epochs += band.size();
  }
  if (harmonics < 2 || !(chi2_0 > 0) || epochs < 2) return f;
  const double at_f = best_power_near(bands, f, grid_step, harmonics).power;
  const double ln_n = std::log(static_cast<double>(epochs));
  for (int k = harmonics; k >= 2; --k) {
    const double kf = k * f;
    if (kf - k * grid_step / 2 > max_frequency) continue;
    const int nested = harmonics / k;
    const FinePeak at_kf = best_power_near(bands, kf, k * grid_step, nested);
    const double extra_terms = 2.0 * static_cast<double>(bands.size()) * (harmonics - nested);
    if ((at_f - at_kf.power) * chi2_0 < extra_terms * ln_n) return at_kf.frequency;
  }
  return f;
}

double false_alarm_probability(double z, const TimeSeries& series, double max_frequency) {
  const double n = static_cast<double>(series.size());
  if (n < 5) return 1.0;
  z = std::clamp(z, 0.0, 1.0);
  const Prepared p = prepare(series);
  double var_t = 0;
  for (std::size_t i = 0; i < p.t.size(); ++i) var_t += p.w[i] * p.t[i] * p.t[i];
  const double w_eff = max_frequency * std::sqrt(4.0 * std::numbers::pi * var_t);
  const double nh = n - 1, nk = n - 3;
  const double gamma =
      std::sqrt(2.0 / nh) * std::exp(std::lgamma(nh / 2) - std::lgamma((nh - 1) / 2));
  const double tau = gamma * w_eff * std::pow(1.0 - z, 0.5 * (nk - 1)) * std::sqrt(0.5 * nh * z);
  const double fap_single = std::pow(1.0 - z, 0.5 * nk);
  return std::clamp(-std::expm1(-tau) + fap_single * std::exp(-tau), 0.0, 1.0);
}

}  // namespace rungcal
