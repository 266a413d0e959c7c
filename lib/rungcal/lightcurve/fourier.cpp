// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/fourier.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <stdexcept>

#include <ceres/ceres.h>

namespace rungcal {
namespace {

constexpr double kTwoPi = 2.0 * std::numbers::pi;
constexpr int kIntensitySteps = 512;
constexpr int kExtremumSteps = 2048;

// The basis row [1, cos x, sin x, ..., cos Kx, sin Kx] at x = 2 pi phase.
void basis_row(double phase, int order, double* row) {
  row[0] = 1.0;
  const double x = kTwoPi * (phase - std::floor(phase));
  const double c1 = std::cos(x), s1 = std::sin(x);
  double c = c1, s = s1;
  for (int k = 1; k <= order; ++k) {
    row[2 * k - 1] = c;
    row[2 * k] = s;
    const double cn = c * c1 - s * s1;
    s = s * c1 + c * s1;
    c = cn;
  }
}

// Phase in cycles since t_ref, kept exact for long baselines by reducing f (t - t_ref).
double phase_of(double t, double frequency, double t_ref) { return frequency * (t - t_ref); }

void finish_curve(FourierCurve& curve, const TimeSeries& s, double frequency, double t_ref) {
  const int p = 2 * curve.order + 1;
  std::vector<double> row(static_cast<std::size_t>(p));
  curve.chi2 = 0;
  double sq = 0;
  for (std::size_t i = 0; i < s.size(); ++i) {
    basis_row(phase_of(s.t[i], frequency, t_ref), curve.order, row.data());
    double m = 0;
    for (int j = 0; j < p; ++j) m += row[static_cast<std::size_t>(j)] * curve.coefficients(j);
    const double r = s.y[i] - m;
    curve.chi2 += (r / s.dy[i]) * (r / s.dy[i]);
    sq += r * r;
  }
  curve.points = s.size();
  curve.rms = s.size() ? std::sqrt(sq / static_cast<double>(s.size())) : 0.0;
}

// Covariance scaled up by the reduced chi^2 when the scatter exceeds the stated errors
// (common practice; errors are never scaled down).
double covariance_scale(double chi2, int dof) { return dof > 0 ? std::max(1.0, chi2 / dof) : 1.0; }

// Residuals (y - m) / sigma of one band and their derivatives by the shared frequency and
// by the band's coefficients.
class BandResidual final : public ceres::CostFunction {
 public:
  BandResidual(const TimeSeries& s, int order, double t_ref) : s_(s), order_(order), t_ref_(t_ref) {
    set_num_residuals(static_cast<int>(s.size()));
    mutable_parameter_block_sizes()->push_back(1);
    mutable_parameter_block_sizes()->push_back(2 * order + 1);
  }

  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override {
    const double f = parameters[0][0];
    const double* c = parameters[1];
    const int p = 2 * order_ + 1;
    std::vector<double> row(static_cast<std::size_t>(p));
    for (std::size_t i = 0; i < s_.size(); ++i) {
      const double tau = s_.t[i] - t_ref_;
      basis_row(f * tau, order_, row.data());
      double m = 0, dm_df = 0;
      for (int j = 0; j < p; ++j) m += row[static_cast<std::size_t>(j)] * c[j];
      for (int k = 1; k <= order_; ++k) {
        // d/df [a cos(2 pi k f tau) + b sin(...)] = 2 pi k tau (-a sin + b cos)
        const double ck = row[static_cast<std::size_t>(2 * k - 1)],
                     sk = row[static_cast<std::size_t>(2 * k)];
        dm_df += kTwoPi * k * tau * (-c[2 * k - 1] * sk + c[2 * k] * ck);
      }
      const double inv = 1.0 / s_.dy[i];
      residuals[i] = (s_.y[i] - m) * inv;
      if (jacobians) {
        if (jacobians[0]) jacobians[0][i] = -dm_df * inv;
        if (jacobians[1])
          for (int j = 0; j < p; ++j)
            jacobians[1][static_cast<std::size_t>(i) * p + j] =
                -row[static_cast<std::size_t>(j)] * inv;
      }
    }
    return true;
  }

 private:
  const TimeSeries& s_;
  int order_;
  double t_ref_;
};

// d(measure)/d(coefficients) by central differences, for the Fourier-parameter errors.
template <typename F>
double delta_method_error(const FourierCurve& curve, F&& measure) {
  const Eigen::Index p = curve.coefficients.size();
  Eigen::VectorXd g(p);
  Eigen::VectorXd c = curve.coefficients;
  for (Eigen::Index j = 0; j < p; ++j) {
    const double h = 1e-6 * std::max(1e-3, std::abs(c(j)));
    Eigen::VectorXd up = c, down = c;
    up(j) += h;
    down(j) -= h;
    double dv = measure(up) - measure(down);
    // An angle that wraps between the two evaluations.
    if (dv > std::numbers::pi) dv -= kTwoPi;
    if (dv < -std::numbers::pi) dv += kTwoPi;
    g(j) = dv / (2 * h);
  }
  const double v = g.dot(curve.covariance * g);
  return v > 0 ? std::sqrt(v) : 0.0;
}

double wrap_angle(double a) {
  a = std::fmod(a, kTwoPi);
  return a < 0 ? a + kTwoPi : a;
}

// Sine-series amplitude and phase of harmonic k from the cosine/sine coefficients:
// a cos x + b sin x = A sin(x + phi) with A = hypot(a, b), phi = atan2(a, b).
double sine_amplitude(const Eigen::VectorXd& c, int k) {
  return std::hypot(c(2 * k - 1), c(2 * k));
}
double sine_phase(const Eigen::VectorXd& c, int k) { return std::atan2(c(2 * k - 1), c(2 * k)); }

double amplitude_ratio(const Eigen::VectorXd& c, int k) {
  return sine_amplitude(c, k) / sine_amplitude(c, 1);
}
double phase_difference(const Eigen::VectorXd& c, int k) {
  return wrap_angle(sine_phase(c, k) - k * sine_phase(c, 1));
}

}  // namespace

double FourierCurve::magnitude_at_phase(double phase) const {
  std::vector<double> row(static_cast<std::size_t>(2 * order + 1));
  basis_row(phase, order, row.data());
  double m = 0;
  for (int j = 0; j < 2 * order + 1; ++j) m += row[static_cast<std::size_t>(j)] * coefficients(j);
  return m;
}

FourierCurve fit_fourier_fixed(const TimeSeries& s, double frequency, double t_ref, int order) {
  const int p = 2 * order + 1;
  if (order < 0 || s.size() < static_cast<std::size_t>(p))
    throw std::invalid_argument("too few points for the Fourier order");
  Eigen::MatrixXd a = Eigen::MatrixXd::Zero(p, p);
  Eigen::VectorXd r = Eigen::VectorXd::Zero(p);
  Eigen::VectorXd row(p);
  for (std::size_t i = 0; i < s.size(); ++i) {
    basis_row(phase_of(s.t[i], frequency, t_ref), order, row.data());
    const double w = 1.0 / (s.dy[i] * s.dy[i]);
    a.selfadjointView<Eigen::Lower>().rankUpdate(row, w);
    r += w * s.y[i] * row;
  }
  a = a.selfadjointView<Eigen::Lower>();
  FourierCurve curve;
  curve.order = order;
  Eigen::LDLT<Eigen::MatrixXd> ldlt(a);
  curve.coefficients = ldlt.solve(r);
  curve.covariance = ldlt.solve(Eigen::MatrixXd::Identity(p, p));
  finish_curve(curve, s, frequency, t_ref);
  curve.covariance *= covariance_scale(curve.chi2, static_cast<int>(s.size()) - p);
  return curve;
}

int order_by_bic(const TimeSeries& s, double frequency, double t_ref, int max_order, int min_dof) {
  int best = 0;
  double best_bic = 0;
  const double log_n = std::log(static_cast<double>(std::max<std::size_t>(s.size(), 1)));
  for (int k = 1; k <= max_order; ++k) {
    const int p = 2 * k + 1;
    if (static_cast<int>(s.size()) - p < min_dof) break;
    const FourierCurve c = fit_fourier_fixed(s, frequency, t_ref, k);
    const double bic = c.chi2 + p * log_n;
    if (best == 0 || bic < best_bic) {
      best = k;
      best_bic = bic;
    }
  }
  return best;
}

LightCurveFit refine_light_curve(const std::vector<TimeSeries>& bands,
                                 const std::vector<int>& orders, double frequency, double t_ref) {
  if (bands.size() != orders.size()) throw std::invalid_argument("one Fourier order per band");
  LightCurveFit fit;
  fit.t_ref = t_ref;
  double f = frequency;
  std::vector<Eigen::VectorXd> coefficients;
  for (std::size_t b = 0; b < bands.size(); ++b)
    coefficients.push_back(fit_fourier_fixed(bands[b], frequency, t_ref, orders[b]).coefficients);

  ceres::Problem::Options po;
  po.cost_function_ownership = ceres::TAKE_OWNERSHIP;
  ceres::Problem problem(po);
  std::vector<BandResidual*> costs;
  for (std::size_t b = 0; b < bands.size(); ++b) {
    auto* cost = new BandResidual(bands[b], orders[b], t_ref);
    costs.push_back(cost);
    problem.AddResidualBlock(cost, nullptr, &f, coefficients[b].data());
  }
  ceres::Solver::Options so;
  so.linear_solver_type = ceres::DENSE_QR;
  so.max_num_iterations = 100;
  so.function_tolerance = 1e-14;
  so.gradient_tolerance = 1e-14;
  so.parameter_tolerance = 1e-14;
  so.num_threads = 1;
  so.logging_type = ceres::SILENT;
  ceres::Solver::Summary summary;
  ceres::Solve(so, &problem, &summary);
  fit.frequency = f;
  fit.converged = summary.termination_type == ceres::CONVERGENCE;
  fit.iterations = static_cast<int>(summary.iterations.size());
  fit.message = summary.message;

  // Covariance of (f, all coefficients) from J^T J at the optimum.
  int n_par = 1, n_res = 0;
  for (std::size_t b = 0; b < bands.size(); ++b) {
    n_par += 2 * orders[b] + 1;
    n_res += static_cast<int>(bands[b].size());
  }
  Eigen::MatrixXd jtj = Eigen::MatrixXd::Zero(n_par, n_par);
  int offset = 1;
  for (std::size_t b = 0; b < bands.size(); ++b) {
    const int p = 2 * orders[b] + 1;
    const int n = static_cast<int>(bands[b].size());
    Eigen::VectorXd res(n), jf(n);
    Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> jc(n, p);
    const double* params[] = {&f, coefficients[b].data()};
    double* jac[] = {jf.data(), jc.data()};
    costs[b]->Evaluate(params, res.data(), jac);
    Eigen::MatrixXd j(n, p + 1);
    j.col(0) = jf;
    j.rightCols(p) = jc;
    Eigen::MatrixXd block = j.transpose() * j;
    jtj(0, 0) += block(0, 0);
    jtj.block(0, offset, 1, p) += block.block(0, 1, 1, p);
    jtj.block(offset, 0, p, 1) += block.block(1, 0, p, 1);
    jtj.block(offset, offset, p, p) += block.bottomRightCorner(p, p);
    offset += p;
  }
  Eigen::MatrixXd cov = jtj.ldlt().solve(Eigen::MatrixXd::Identity(n_par, n_par));
  fit.chi2 = 0;
  for (std::size_t b = 0; b < bands.size(); ++b) {
    FourierCurve curve;
    curve.order = orders[b];
    curve.coefficients = coefficients[b];
    finish_curve(curve, bands[b], f, t_ref);
    fit.chi2 += curve.chi2;
    fit.bands.push_back(std::move(curve));
  }
  fit.dof = n_res - n_par;
  const double scale = covariance_scale(fit.chi2, fit.dof);
  cov *= scale;
  fit.frequency_err = std::sqrt(std::max(0.0, cov(0, 0)));
  offset = 1;
  for (auto& curve : fit.bands) {
    const int p = 2 * curve.order + 1;
    curve.covariance = cov.block(offset, offset, p, p);
    offset += p;
  }
  return fit;
}

CurveMeasures measure_curve(const FourierCurve& curve, double frequency, double t_ref) {
  CurveMeasures m;
  const int p = 2 * curve.order + 1;
  m.magnitude_mean = curve.coefficients(0);
  m.magnitude_mean_err = std::sqrt(std::max(0.0, curve.covariance(0, 0)));

  // Intensity mean: subtract m0 before exponentiating to keep the fluxes near 1.
  Eigen::VectorXd flux_weighted_basis = Eigen::VectorXd::Zero(p);
  Eigen::VectorXd row(p);
  double flux = 0;
  for (int i = 0; i < kIntensitySteps; ++i) {
    const double phase = (i + 0.5) / kIntensitySteps;
    basis_row(phase, curve.order, row.data());
    const double fl = std::pow(10.0, -0.4 * (row.dot(curve.coefficients) - m.magnitude_mean));
    flux += fl;
    flux_weighted_basis += fl * row;
  }
  m.intensity_mean = m.magnitude_mean - 2.5 * std::log10(flux / kIntensitySteps);
  const Eigen::VectorXd gradient = flux_weighted_basis / flux;
  m.intensity_mean_err = std::sqrt(std::max(0.0, gradient.dot(curve.covariance * gradient)));

  // Extrema on a fine grid, the brightest refined by a parabola through its neighbours.
  std::vector<double> mag(kExtremumSteps);
  for (int i = 0; i < kExtremumSteps; ++i)
    mag[static_cast<std::size_t>(i)] =
        curve.magnitude_at_phase(static_cast<double>(i) / kExtremumSteps);
  auto [lo, hi] = std::minmax_element(mag.begin(), mag.end());
  const int i0 = static_cast<int>(lo - mag.begin());
  const double ym = mag[static_cast<std::size_t>((i0 + kExtremumSteps - 1) % kExtremumSteps)],
               y0 = *lo, yp = mag[static_cast<std::size_t>((i0 + 1) % kExtremumSteps)];
  const double denom = ym - 2 * y0 + yp;
  const double shift = denom > 0 ? 0.5 * (ym - yp) / denom : 0.0;
  double phase_max = (i0 + shift) / kExtremumSteps;
  phase_max -= std::floor(phase_max + 0.5);
  m.phase_of_max = phase_max;
  m.epoch_of_max = t_ref + phase_max / frequency;
  const double brightest = curve.magnitude_at_phase(phase_max);
  m.amplitude = *hi - std::min(brightest, y0);

  // Harmonic k = 2 and 3 against the first; NaN where the order is lower.
  struct Ratio {
    double *r, *r_err, *phi, *phi_err;
  };
  const Ratio ratios[] = {{&m.r21, &m.r21_err, &m.phi21, &m.phi21_err},
                          {&m.r31, &m.r31_err, &m.phi31, &m.phi31_err}};
  for (int k = 2; k <= 3; ++k) {
    const Ratio& out = ratios[k - 2];
    const bool present = curve.order >= k;
    const double nan = std::numeric_limits<double>::quiet_NaN();
    auto ratio = [k](const Eigen::VectorXd& c) { return amplitude_ratio(c, k); };
    auto phase = [k](const Eigen::VectorXd& c) { return phase_difference(c, k); };
    *out.r = present ? ratio(curve.coefficients) : nan;
    *out.phi = present ? phase(curve.coefficients) : nan;
    *out.r_err = present ? delta_method_error(curve, ratio) : nan;
    *out.phi_err = present ? delta_method_error(curve, phase) : nan;
  }
  return m;
}

double sinusoid_intensity_offset(double semi_amplitude) {
  return -2.5 * std::log10(std::cyl_bessel_i(0.0, 0.4 * std::log(10.0) * semi_amplitude));
}

}  // namespace rungcal
