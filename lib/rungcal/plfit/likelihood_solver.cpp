// SPDX-License-Identifier: MIT
#include "rungcal/plfit/likelihood_solver.hpp"

#include <ceres/gradient_problem.h>
#include <ceres/gradient_problem_solver.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include <Eigen/Dense>

namespace rungcal::hier {
namespace {

// The free parameters as the solver's vector: x_free = base + P y with P the preconditioner
// (identity when there is none), so the solver's gradient is P^T g.
class FreeProblem final : public ceres::FirstOrderFunction {
 public:
  FreeProblem(Objective& e, const Eigen::VectorXd& x0, std::vector<int> free,
              const Eigen::MatrixXd* metric)
      : e_(e), x0_(x0), free_(std::move(free)), metric_(metric) {}
  bool Evaluate(const double* p, double* cost, double* gradient) const override {
    Eigen::VectorXd x = expand(p), g;
    *cost = e_.evaluate(x, gradient ? &g : nullptr);
    if (!std::isfinite(*cost)) return false;
    if (gradient) {
      Eigen::VectorXd gf(static_cast<Eigen::Index>(free_.size()));
      for (std::size_t k = 0; k < free_.size(); ++k) gf[static_cast<Eigen::Index>(k)] = g[free_[k]];
      if (metric_) gf = (metric_->transpose() * gf).eval();
      for (Eigen::Index k = 0; k < gf.size(); ++k) {
        gradient[k] = gf[k];
        if (!std::isfinite(gradient[k])) return false;
      }
    }
    return true;
  }
  int NumParameters() const override { return static_cast<int>(free_.size()); }
  Eigen::VectorXd expand(const double* p) const {
    Eigen::VectorXd x = x0_;
    const Eigen::Map<const Eigen::VectorXd> y(p, static_cast<Eigen::Index>(free_.size()));
    const Eigen::VectorXd step = metric_ ? Eigen::VectorXd(*metric_ * y) : Eigen::VectorXd(y);
    for (std::size_t k = 0; k < free_.size(); ++k)
      x[free_[k]] += step[static_cast<Eigen::Index>(k)];
    return x;
  }

 private:
  Objective& e_;
  Eigen::VectorXd x0_;
  std::vector<int> free_;
  const Eigen::MatrixXd* metric_;
};

// The Hessian of -ln L over the free parameters `free`, in the solver's coordinates:
// fourth-order central differences of the analytic gradient, symmetrised.
Eigen::MatrixXd internal_hessian(Objective& e, const Eigen::VectorXd& x,
                                 const std::vector<int>& free) {
  const auto F = static_cast<Eigen::Index>(free.size());
  Eigen::MatrixXd H(F, F);
  const double h = 1e-3;
  for (Eigen::Index a = 0; a < F; ++a) {
    Eigen::VectorXd g[4];
    const double steps[4] = {-2 * h, -h, h, 2 * h};
    for (int k = 0; k < 4; ++k) {
      Eigen::VectorXd xs = x;
      xs[free[static_cast<std::size_t>(a)]] += steps[k];
      e.evaluate(xs, &g[k]);
      if (g[k].size() != x.size())
        g[k] = Eigen::VectorXd::Constant(x.size(), std::numeric_limits<double>::quiet_NaN());
    }
    for (Eigen::Index b = 0; b < F; ++b) {
      const int j = free[static_cast<std::size_t>(b)];
      H(b, a) = (8.0 * (g[2][j] - g[1][j]) - (g[3][j] - g[0][j])) / (12.0 * h);
    }
  }
  return 0.5 * (H + H.transpose());
}

// The bootstrap's metric (FitSettings::preconditioner) over every free parameter: from the
// Hessian H over `measured` (a subset of `free`), P = V diag(max(lambda, 1)^-1/2) by its
// eigen-decomposition, so that P P^T is H's inverse where the data constrain it and a
// direction they hardly constrain gets a unit step, not an unbounded one; unit steps for
// the parameters H leaves out.
std::shared_ptr<const Eigen::MatrixXd> metric_from_hessian(const Eigen::MatrixXd& H,
                                                           const std::vector<int>& measured,
                                                           const std::vector<int>& free) {
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> es(H);
  if (es.info() != Eigen::Success) return nullptr;
  const Eigen::MatrixXd block =
      es.eigenvectors() * es.eigenvalues().cwiseMax(1.0).cwiseSqrt().cwiseInverse().asDiagonal();
  auto position = [&](int j) {
    return static_cast<Eigen::Index>(std::find(free.begin(), free.end(), j) - free.begin());
  };
  const auto F = static_cast<Eigen::Index>(free.size());
  auto P = std::make_shared<Eigen::MatrixXd>(Eigen::MatrixXd::Identity(F, F));
  for (std::size_t a = 0; a < measured.size(); ++a)
    for (std::size_t b = 0; b < measured.size(); ++b)
      (*P)(position(measured[a]), position(measured[b])) =
          block(static_cast<Eigen::Index>(a), static_cast<Eigen::Index>(b));
  return P;
}

// covariance(i, j) for i, j in `measured` from C in the solver's coordinates, by the delta
// method.
void report_covariance(const Eigen::MatrixXd& C, const std::vector<Scale>& scales,
                       const std::vector<int>& measured, const Eigen::VectorXd& theta,
                       Eigen::MatrixXd& covariance) {
  const auto F = static_cast<Eigen::Index>(measured.size());
  for (Eigen::Index a = 0; a < F; ++a)
    for (Eigen::Index b = 0; b < F; ++b) {
      const int i = measured[static_cast<std::size_t>(a)],
                j = measured[static_cast<std::size_t>(b)];
      covariance(i, j) = slope_of(scales[static_cast<std::size_t>(i)], theta[i]) * C(a, b) *
                         slope_of(scales[static_cast<std::size_t>(j)], theta[j]);
    }
}

}  // namespace

double to_internal(Scale s, double v) {
  switch (s) {
    case Scale::kLinear:
      return v;
    case Scale::kLog:
      return std::log(std::max(v, 1e-12));
    case Scale::kLogPlusOne:
      return std::log(std::max(v + 1.0, 1e-12));
    case Scale::kLogit: {
      const double f = std::clamp(v, 1e-12, 1.0 - 1e-12);
      return std::log(f / (1.0 - f));
    }
    case Scale::kAtanh:
      return std::atanh(std::clamp(v, -1.0 + 1e-12, 1.0 - 1e-12));
    case Scale::kLogAboveThree:
      return std::log(std::max(v - 3.0, 1e-12));
  }
  return v;
}

double to_external(Scale s, double x) {
  switch (s) {
    case Scale::kLinear:
      return x;
    case Scale::kLog:
      return std::exp(x);
    case Scale::kLogPlusOne:
      return std::exp(x) - 1.0;
    case Scale::kLogit:
      return 1.0 / (1.0 + std::exp(-x));
    case Scale::kAtanh:
      return std::tanh(x);
    case Scale::kLogAboveThree:
      return 3.0 + std::exp(x);
  }
  return x;
}

double slope_of(Scale s, double v) {
  switch (s) {
    case Scale::kLinear:
      return 1.0;
    case Scale::kLog:
      return v;
    case Scale::kLogPlusOne:
      return v + 1.0;
    case Scale::kLogit:
      return v * (1.0 - v);
    case Scale::kAtanh:
      return 1.0 - v * v;
    case Scale::kLogAboveThree:
      return v - 3.0;
  }
  return 1.0;
}

Eigen::VectorXd internal_of(const std::vector<Scale>& scales, const Eigen::VectorXd& theta) {
  Eigen::VectorXd x(theta.size());
  for (Eigen::Index j = 0; j < theta.size(); ++j)
    x[j] = to_internal(scales[static_cast<std::size_t>(j)], theta[j]);
  return x;
}

Eigen::VectorXd external_of(const std::vector<Scale>& scales, const Eigen::VectorXd& x) {
  Eigen::VectorXd t(x.size());
  for (Eigen::Index j = 0; j < x.size(); ++j)
    t[j] = to_external(scales[static_cast<std::size_t>(j)], x[j]);
  return t;
}

double hyperprior_terms(const Eigen::VectorXd& t, int bin0, int n, double walk_sigma,
                        const std::vector<PriorRow>& rows, const std::vector<ParamSpec>& params,
                        Eigen::VectorXd& g) {
  double value = 0;
  for (int j = 0; j < n; ++j) {
    const double z = (t[bin0 + j] - (j ? t[bin0 + j - 1] : 0.0)) / walk_sigma;
    value += 0.5 * z * z;
    g[bin0 + j] += z / walk_sigma;
    if (j) g[bin0 + j - 1] -= z / walk_sigma;
  }
  for (const PriorRow& row : rows) {
    const double z = prior_residual(row, params, t.data());
    value += 0.5 * z * z;
    for (std::size_t k = 0; k < row.params.size(); ++k) g[row.params[k]] += z * row.weights[k];
  }
  return value;
}

void internal_gradient(const std::vector<Scale>& scales, const Eigen::VectorXd& t,
                       const Eigen::VectorXd& g, Eigen::VectorXd& grad) {
  grad.resize(t.size());
  for (Eigen::Index j = 0; j < t.size(); ++j)
    grad[j] = g[j] * slope_of(scales[static_cast<std::size_t>(j)], t[j]);
}

std::vector<int> free_parameters(const std::vector<ParamSpec>& params) {
  std::vector<int> free;
  for (std::size_t j = 0; j < params.size(); ++j)
    if (params[j].mode != ParamMode::kFixed) free.push_back(static_cast<int>(j));
  return free;
}

FitSolution minimise(Objective& e, const std::vector<Scale>& scales, const FitSettings& settings,
                     const Eigen::VectorXd& start) {
  const Eigen::VectorXd x0 = internal_of(scales, start);
  std::vector<int> free = free_parameters(settings.params);
  FitSolution sol;
  sol.theta = start;
  // The preconditioner applies when it was made for these free parameters.
  const Eigen::MatrixXd* metric =
      settings.preconditioner &&
              settings.preconditioner->rows() == static_cast<Eigen::Index>(free.size())
          ? settings.preconditioner.get()
          : nullptr;
  // FreeProblem adds the solver's vector (or P times it) to base.
  Eigen::VectorXd base = x0;
  if (!metric)
    for (int j : free) base[j] = 0.0;
  auto* fn = new FreeProblem(e, base, free, metric);  // owned by the problem
  ceres::GradientProblem problem(fn);
  std::vector<double> p;
  for (int j : free) p.push_back(metric ? 0.0 : x0[j]);
  ceres::GradientProblemSolver::Options so;
  so.line_search_direction_type =
      ceres::BFGS;  // a few dozen parameters: a dense inverse Hessian is cheap
  so.max_num_iterations = settings.max_iterations;
  so.function_tolerance = settings.function_tolerance;
  so.parameter_tolerance = settings.parameter_tolerance;
  // The gradient tolerance follows the function tolerance: 1e-10 for a full fit (1e-15),
  // 1e-4 for a bootstrap resample (1e-9), whose optimum needs far less than its spread.
  so.gradient_tolerance = 1e-10 * settings.function_tolerance / 1e-15;
  // Under the metric the gradient is in units of the parameters' errors (P^T g, P P^T the
  // inverse Hessian): 0.01 leaves each resample's optimum within a few hundredths of an
  // error (tests/hierarchical_test.cpp), which changes a bootstrap spread by 0.1% relative.
  // Tighter, BFGS spends most of its iterations (17 against 6 in bench/bench_hierarchical)
  // on digits nobody reads.
  if (metric) so.gradient_tolerance = std::max(so.gradient_tolerance, 1e-2);
  so.logging_type = ceres::SILENT;
  ceres::GradientProblemSolver::Summary summary;
  if (!p.empty()) ceres::Solve(so, problem, p.data(), &summary);
  sol.theta = external_of(scales, fn->expand(p.data()));
  for (std::size_t j = 0; j < settings.params.size(); ++j)
    if (settings.params[j].mode == ParamMode::kFixed)
      sol.theta[static_cast<Eigen::Index>(j)] = start[static_cast<Eigen::Index>(j)];
  sol.usable = p.empty() || summary.IsSolutionUsable();
  sol.termination = ceres::TerminationTypeToString(summary.termination_type);
  sol.message = summary.message;
  sol.iterations = static_cast<int>(summary.iterations.size());
  sol.cost = summary.final_cost;
  sol.brief_report = summary.BriefReport();
  if (!std::isfinite(sol.cost) || !sol.theta.allFinite()) sol.usable = false;
  return sol;
}

Eigen::VectorXd restricted_step(Objective& e, const std::vector<Scale>& scales,
                                const std::vector<int>& location, const std::vector<int>& scatter,
                                const Eigen::VectorXd& theta, const Eigen::MatrixXd& covariance) {
  auto measured = [&](int j) {
    const double v = covariance(j, j);
    return std::isfinite(v) && v > 0;
  };
  std::vector<int> loc, sca, moved;
  for (int j : location)
    if (measured(j)) loc.push_back(j);
  for (int j : scatter)
    if (measured(j)) sca.push_back(j);
  for (Eigen::Index j = 0; j < theta.size(); ++j)
    if (measured(static_cast<int>(j)) && covariance.row(j).allFinite())
      moved.push_back(static_cast<int>(j));
  for (std::vector<int>* v : {&loc, &sca}) {  // a shared slope is listed once per relation
    std::sort(v->begin(), v->end());
    v->erase(std::unique(v->begin(), v->end()), v->end());
  }
  if (loc.empty() || sca.empty()) return theta;
  const Eigen::VectorXd x = internal_of(scales, theta);
  auto half_log_det = [&](const Eigen::VectorXd& at) {
    Eigen::LLT<Eigen::MatrixXd> llt(internal_hessian(e, at, loc));
    if (llt.info() != Eigen::Success) return std::numeric_limits<double>::quiet_NaN();
    return llt.matrixLLT().diagonal().array().log().sum();  // 1/2 ln det = sum ln L_ii
  };
  // The penalty's gradient along each scatter, in the solver's coordinates (a log scale for
  // a scatter: a step of 0.01 is 1% of it, far below its error at any useful N).
  const double h = 1e-2;
  Eigen::VectorXd gradient(static_cast<Eigen::Index>(sca.size()));
  for (std::size_t v = 0; v < sca.size(); ++v) {
    Eigen::VectorXd up = x, down = x;
    up[sca[v]] += h, down[sca[v]] -= h;
    gradient[static_cast<Eigen::Index>(v)] = (half_log_det(up) - half_log_det(down)) / (2 * h);
  }
  if (!gradient.allFinite()) return theta;
  // dx = -C g with C the inverse Hessian in the solver's coordinates.
  auto internal_cov = [&](int i, int j) {
    return covariance(i, j) / (slope_of(scales[static_cast<std::size_t>(i)], theta[i]) *
                               slope_of(scales[static_cast<std::size_t>(j)], theta[j]));
  };
  Eigen::VectorXd out = theta;
  for (int a : moved) {
    double dx = 0;
    for (std::size_t v = 0; v < sca.size(); ++v)
      dx -= internal_cov(a, sca[v]) * gradient[static_cast<Eigen::Index>(v)];
    out[a] = to_external(scales[static_cast<std::size_t>(a)], x[a] + dx);
  }
  return out.allFinite() ? out : theta;
}

bool covariance_from_hessian(Objective& e, const std::vector<Scale>& scales,
                             const std::vector<int>& measured, const std::vector<int>& free,
                             const Eigen::VectorXd& theta, Eigen::MatrixXd& covariance,
                             std::shared_ptr<const Eigen::MatrixXd>* preconditioner,
                             Eigen::MatrixXd* inverse) {
  if (measured.empty()) return true;
  const Eigen::VectorXd x = internal_of(scales, theta);
  const auto F = static_cast<Eigen::Index>(measured.size());
  const Eigen::MatrixXd H = internal_hessian(e, x, measured);
  if (!H.allFinite()) return false;
  if (preconditioner) *preconditioner = metric_from_hessian(H, measured, free);
  Eigen::LLT<Eigen::MatrixXd> llt(H);
  if (llt.info() != Eigen::Success) return false;
  const Eigen::MatrixXd C = llt.solve(Eigen::MatrixXd::Identity(F, F));
  report_covariance(C, scales, measured, theta, covariance);
  if (inverse) *inverse = C;
  return true;
}

bool sandwich_from_hessian(const Eigen::MatrixXd& inverse, const Eigen::MatrixXd& unit_scores,
                           Objective& rest, const std::vector<Scale>& scales,
                           const std::vector<int>& measured, const Eigen::VectorXd& theta,
                           Eigen::MatrixXd& covariance) {
  if (measured.empty()) return true;
  const auto F = static_cast<Eigen::Index>(measured.size());
  const Eigen::Index n = unit_scores.rows();
  if (n <= F) return false;  // no spread to measure
  Eigen::MatrixXd S(n, F);
  for (Eigen::Index a = 0; a < F; ++a)
    S.col(a) = unit_scores.col(measured[static_cast<std::size_t>(a)]);
  const Eigen::MatrixXd rest_hessian = internal_hessian(rest, internal_of(scales, theta), measured);
  if (!rest_hessian.allFinite()) return false;
  // The parameters the stars determine: those the priors hold count for less.
  const double p = std::clamp(static_cast<double>(F) - (inverse * rest_hessian).trace(), 0.0,
                              static_cast<double>(F));
  const Eigen::MatrixXd meat =
      static_cast<double>(n) / (static_cast<double>(n) - p) * (S.transpose() * S) + rest_hessian;
  if (!meat.allFinite()) return false;
  Eigen::MatrixXd C = inverse * meat * inverse;
  report_covariance(0.5 * (C + C.transpose()), scales, measured, theta, covariance);
  return true;
}

bool hessian_and_sandwich(StarSumObjective& f, StarSumObjective& rest, Eigen::Index stars,
                          const std::vector<Scale>& scales, const std::vector<int>& measured,
                          const std::vector<int>& free, const Eigen::VectorXd& theta,
                          Eigen::MatrixXd& covariance,
                          std::shared_ptr<const Eigen::MatrixXd>* preconditioner,
                          Eigen::MatrixXd* sandwich) {
  Eigen::MatrixXd inverse;
  if (!covariance_from_hessian(f, scales, measured, free, theta, covariance, preconditioner,
                               &inverse))
    return false;
  if (sandwich) {
    *sandwich = covariance;
    Eigen::MatrixXd scores(stars, theta.size());
    f.collect_scores(&scores);
    f.evaluate(internal_of(scales, theta), nullptr);
    f.collect_scores(nullptr);
    rest.drop_stars();
    if (!sandwich_from_hessian(inverse, scores, rest, scales, measured, theta, *sandwich))
      sandwich->resize(0, 0);
  }
  return true;
}

}  // namespace rungcal::hier
