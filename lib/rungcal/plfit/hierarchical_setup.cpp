// SPDX-License-Identifier: MIT
// The hierarchical model's set-up (declared in hierarchical.hpp): the histogram's grid, the
// start values of the model's own parameters, and the Gauss-Hermite rule.
#include "rungcal/plfit/hierarchical.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <vector>

#include <Eigen/Dense>

namespace rungcal {

namespace {
std::vector<double> rough_moduli(const FitData& d, double* line_alpha = nullptr) {
  // A line M(x) through the stars with good parallaxes; their moduli from the parallax, the
  // others' from the line.
  std::vector<double> mu(static_cast<std::size_t>(d.parallax.size()),
                         std::numeric_limits<double>::quiet_NaN());
  double n = 0, sx = 0, sy = 0, sxx = 0, sxy = 0;
  for (Eigen::Index i = 0; i < d.parallax.size(); ++i) {
    if (!(d.plx[i] > 0 && d.plx[i] * d.plx[i] > 25.0 * d.var_plx[i])) continue;
    mu[static_cast<std::size_t>(i)] = 10.0 - 5.0 * std::log10(d.plx[i]);
    const double x = d.parallax.x[i], y = d.parallax.m0[i] - mu[static_cast<std::size_t>(i)];
    n += 1, sx += x, sy += y, sxx += x * x, sxy += x * y;
  }
  const double den = n * sxx - sx * sx;
  const double beta = n > 2 && std::abs(den) > 1e-12 ? (n * sxy - sx * sy) / den : -3.0;
  const double alpha = n > 0 ? (sy - beta * sx) / n : -4.0;
  if (line_alpha) *line_alpha = alpha;
  for (Eigen::Index i = 0; i < d.parallax.size(); ++i)
    if (!std::isfinite(mu[static_cast<std::size_t>(i)]))
      mu[static_cast<std::size_t>(i)] = d.parallax.m0[i] - alpha - beta * d.parallax.x[i];
  return mu;
}

}  // namespace

int histogram_grid(const FitData& data, HierarchicalSettings& settings) {
  double line_alpha = 0;
  std::vector<double> mu = rough_moduli(data, &line_alpha);
  settings.histogram_alpha_ref = line_alpha;
  std::erase_if(mu, [](double v) { return !std::isfinite(v); });
  if (mu.empty()) return 2;
  std::sort(mu.begin(), mu.end());
  // The 0.5% and 99.5% points: one wild star does not stretch the grid.
  const double lo = mu[static_cast<std::size_t>(0.005 * static_cast<double>(mu.size() - 1))] -
                    settings.histogram_margin;
  const double hi = mu[static_cast<std::size_t>(0.995 * static_cast<double>(mu.size() - 1))] +
                    settings.histogram_margin;
  double step = settings.histogram_step;
  while ((hi - lo) / step + 1 > 30) step *= 1.25;
  settings.histogram_step = step;
  settings.histogram_start = lo;
  return static_cast<int>(std::ceil((hi - lo) / step)) + 1;
}

double histogram_start_at(const HierarchicalSettings& settings, double alpha) {
  return settings.histogram_start - (alpha - settings.histogram_alpha_ref);
}

void gauss_hermite(int n, std::vector<double>& nodes, std::vector<double>& weights) {
  // The Jacobi matrix of the Hermite polynomials: zero diagonal, off-diagonal sqrt(k / 2).
  Eigen::MatrixXd J = Eigen::MatrixXd::Zero(n, n);
  for (int k = 1; k < n; ++k) J(k, k - 1) = J(k - 1, k) = std::sqrt(0.5 * k);
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> es(J);
  nodes.resize(static_cast<std::size_t>(n));
  weights.resize(static_cast<std::size_t>(n));
  // The weights not from the eigenvectors (sqrt(pi) v_0k^2): those are accurate only to about
  // 1e-16 absolute, so the outer weights of a rule with more than ~30 nodes (true values down
  // to 1e-100) come out as rounding noise, which multiplied by exp(x^2) swamps integrands
  // wider than the rule's Gaussian. Instead the Christoffel numbers w_k = 1 / sum_j<n
  // phi_j(x_k)^2, with the orthonormal Hermite polynomials phi_0 = pi^(-1/4),
  // phi_1 = sqrt(2) x phi_0, phi_(j+1) = sqrt(2 / (j + 1)) x phi_j - sqrt(j / (j + 1)) phi_(j-1)
  // (e.g. Gautschi 2004, Orthogonal Polynomials, section 1.4), accurate to rounding relative.
  for (int k = 0; k < n; ++k) {
    const double x = es.eigenvalues()[k];
    double prev = 0.0, phi = std::pow(std::numbers::pi, -0.25), sum = phi * phi;
    for (int j = 0; j + 1 < n; ++j) {
      const double next =
          std::sqrt(2.0 / (j + 1)) * x * phi - std::sqrt(static_cast<double>(j) / (j + 1)) * prev;
      prev = phi, phi = next;
      sum += phi * phi;
    }
    nodes[static_cast<std::size_t>(k)] = x;
    weights[static_cast<std::size_t>(k)] = 1.0 / sum;
  }
}

void hierarchical_start(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                        Eigen::VectorXd& t) {
  if (L.outlier >= 0) t[L.outlier] = 0.02;
  if (L.outlier_shift >= 0) t[L.outlier_shift] = s.hierarchical.outlier_mag_shift;
  if (L.outlier_width >= 0) t[L.outlier_width] = s.hierarchical.outlier_mag_width;
  if (L.outlier_factor >= 0) t[L.outlier_factor] = s.hierarchical.outlier_parallax_factor;
  if (L.blend >= 0)
    t[L.blend] = 0.02, t[L.blend_scale] = s.params[static_cast<std::size_t>(L.blend_scale)].value;
  if (L.distance_scale >= 0) {
    // The space-density prior's mean distance is 3 L: start there from the photometric distances.
    double sum = 0;
    int n = 0;
    for (Eigen::Index i = 0; i < d.parallax.size(); ++i) {
      const double M = t[L.alpha] + t[L.beta] * d.parallax.x[i];
      const double dist = std::pow(10.0, 0.2 * (d.parallax.m0[i] - M) - 2.0);
      if (std::isfinite(dist) && dist > 0 && dist < 1e3) sum += dist, ++n;
    }
    t[L.distance_scale] = n ? std::max(sum / n / 3.0, 0.01) : 1.0;
    t[L.distance_power] = 2.0;
    t[L.distance_exponent] = 1.0;
  }
  if (L.distance_bin0 >= 0) {
    // Log-weights from the count of rough distance moduli per bin.
    std::vector<double> count(static_cast<std::size_t>(L.distance_bins + 1), 0.5);
    for (double mu : rough_moduli(d)) {
      const long j = std::lround((mu - histogram_start_at(s.hierarchical, t[L.alpha])) /
                                 s.hierarchical.histogram_step);
      if (j >= 0 && j < static_cast<long>(count.size())) count[static_cast<std::size_t>(j)] += 1.0;
    }
    for (int j = 1; j <= L.distance_bins; ++j)
      t[L.distance_bin0 + j - 1] = std::log(count[static_cast<std::size_t>(j)] / count[0]);
  }
  if (L.feh_mean >= 0) {
    double sum = 0, sum2 = 0, err2 = 0;
    int n = 0;
    for (const FitData::Common* c : {&d.parallax, &d.known, &d.anchor})
      for (Eigen::Index i = 0; i < c->size(); ++i) {
        sum += c->feh[i], sum2 += c->feh[i] * c->feh[i], ++n;
        err2 += c->var_feh.size() ? c->var_feh[i] : 0.0;
      }
    const double mean = n ? sum / n : 0.0, var = n ? sum2 / n - mean * mean - err2 / n : 0.0;
    t[L.feh_mean] = mean;
    t[L.feh_spread] = std::sqrt(std::max(var, 0.05 * 0.05));
  }
  for (int j = 0; j < L.size; ++j) {
    const ParamSpec& p = s.params[static_cast<std::size_t>(j)];
    if (p.mode != ParamMode::kFree || p.has_start) t[j] = p.value;
  }
}

}  // namespace rungcal
