// SPDX-License-Identifier: MIT
#include "rungcal/plfit/model.hpp"

#include <ceres/ceres.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include <Eigen/Dense>

#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/plfit/model_parts.hpp"

namespace rungcal {
using namespace model_parts;

ParameterLayout ParameterLayout::for_terms(const ModelTerms& terms,
                                           const std::vector<std::string>& anchors) {
  ParameterLayout L;
  L.names = {"alpha", "beta"};
  int next = 2;
  if (terms.has_break) {
    L.beta_long = next++;
    L.names.push_back("beta_long");
  }
  if (terms.has_metallicity) {
    L.gamma = next++;
    L.names.push_back("gamma");
  }
  L.offset = next++;
  L.names.push_back("parallax_offset_mas");
  L.sigma = next++;
  L.names.push_back("sigma_int");
  L.anchor0 = next;
  for (const auto& a : anchors) {
    L.names.push_back("mu_" + a);
    ++next;
  }
  if (terms.hierarchical) {
    auto add = [&](int& slot, const char* name) {
      slot = next++;
      L.names.push_back(name);
    };
    add(L.outlier, "outlier_fraction");
    add(L.outlier_shift, "outlier_shift_mag");
    add(L.outlier_width, "outlier_width_mag");
    add(L.outlier_factor, "outlier_parallax_factor");
    if (terms.blends) {
      add(L.blend, "blend_fraction");
      add(L.blend_scale, "blend_scale_mag");
    }
    if (terms.distance_bins > 0) {
      L.distance_bin0 = next;
      L.distance_bins = terms.distance_bins - 1;
      for (int j = 1; j < terms.distance_bins; ++j) {
        L.names.push_back("distance_log_weight_" + std::to_string(j));
        ++next;
      }
    } else {
      add(L.distance_scale, "distance_scale_kpc");
      add(L.distance_power, "distance_power");
      add(L.distance_exponent, "distance_exponent");
    }
    if (terms.has_metallicity && terms.feh_errors) {
      add(L.feh_mean, "feh_mean");
      add(L.feh_spread, "feh_spread");
    }
  }
  L.size = next;
  return L;
}

namespace {
// Distinct rows of idx, in first-seen order, with how often each occurs (times the row's
// own weight, so a weighted sample can be resampled again).
struct Distinct {
  std::vector<Eigen::Index> rows;
  std::vector<double> weight;
};
Distinct distinct(const std::vector<Eigen::Index>& idx, const Eigen::ArrayXd& old_weight,
                  Eigen::Index n) {
  Distinct out;
  std::vector<int> slot(static_cast<std::size_t>(n), -1);
  for (Eigen::Index j : idx) {
    int& s = slot[static_cast<std::size_t>(j)];
    if (s < 0) {
      s = static_cast<int>(out.rows.size());
      out.rows.push_back(j);
      out.weight.push_back(0.0);
    }
    out.weight[static_cast<std::size_t>(s)] += old_weight.size() ? old_weight[j] : 1.0;
  }
  return out;
}
FitData::Common take_common(const FitData::Common& c, const Distinct& dd) {
  FitData::Common o;
  const auto n = static_cast<Eigen::Index>(dd.rows.size());
  o.x.resize(n), o.xl.resize(n), o.feh.resize(n), o.m0.resize(n), o.var_m.resize(n),
      o.weight.resize(n);
  if (c.var_feh.size()) o.var_feh.resize(n);
  bool all_one = true;
  for (Eigen::Index i = 0; i < n; ++i) {
    Eigen::Index j = dd.rows[static_cast<std::size_t>(i)];
    o.x[i] = c.x[j], o.xl[i] = c.xl[j], o.feh[i] = c.feh[j], o.m0[i] = c.m0[j],
    o.var_m[i] = c.var_m[j];
    if (c.var_feh.size()) o.var_feh[i] = c.var_feh[j];
    o.weight[i] = dd.weight[static_cast<std::size_t>(i)];
    all_one = all_one && o.weight[i] == 1.0;
    o.row.push_back(c.row[j]);
  }
  if (all_one) o.weight.resize(0);
  o.sqrt_weight = o.weight.sqrt();
  return o;
}
Eigen::ArrayXd take_array(const Eigen::ArrayXd& a, const Distinct& dd) {
  Eigen::ArrayXd o(static_cast<Eigen::Index>(dd.rows.size()));
  for (std::size_t i = 0; i < dd.rows.size(); ++i) o[static_cast<Eigen::Index>(i)] = a[dd.rows[i]];
  return o;
}
std::vector<Eigen::Index> kept(const std::vector<bool>& drop, Eigen::Index n) {
  std::vector<Eigen::Index> out;
  for (Eigen::Index i = 0; i < n; ++i)
    if (drop.empty() || !drop[i]) out.push_back(i);
  return out;
}
}  // namespace

FitData FitData::take(const std::vector<Eigen::Index>& p, const std::vector<Eigen::Index>& k,
                      const std::vector<Eigen::Index>& a) const {
  FitData o;
  Distinct dp = distinct(p, parallax.weight, parallax.size()),
           dk = distinct(k, known.weight, known.size()),
           da = distinct(a, anchor.weight, anchor.size());
  o.parallax = take_common(parallax, dp);
  o.plx = take_array(plx, dp);
  o.var_plx = take_array(var_plx, dp);
  o.known = take_common(known, dk);
  o.mu = take_array(mu, dk);
  o.var_mu = take_array(var_mu, dk);
  o.anchor = take_common(anchor, da);
  for (Eigen::Index i : da.rows) o.group.push_back(group[i]);
  if (anchor_plx.size()) {
    o.anchor_plx = take_array(anchor_plx, da);
    o.anchor_var_plx = take_array(anchor_var_plx, da);
  }
  o.group_plx = group_plx;
  return o;
}

bool has_any_parallax(const FitData& d) {
  if (d.parallax.size() > 0 || (d.anchor_var_plx.size() && (d.anchor_var_plx > 0).any()))
    return true;
  return std::any_of(d.group_plx.begin(), d.group_plx.end(),
                     [](const auto& g) { return g.var > 0; });
}

FitData FitData::without(const std::vector<bool>& dp, const std::vector<bool>& dk,
                         const std::vector<bool>& da) const {
  return take(kept(dp, parallax.size()), kept(dk, known.size()), kept(da, anchor.size()));
}

Eigen::VectorXd starting_vector(const FitData& d, const FitSettings& s, const ParameterLayout& L) {
  Eigen::VectorXd t = Eigen::VectorXd::Zero(L.size);
  // Linear least squares of M = m0 - mu on the stars whose distance is well known.
  std::vector<double> y, x, w;
  for (Eigen::Index i = 0; i < d.parallax.size(); ++i) {
    double p = d.plx[i];
    if (p > 0 && p * p > 25.0 * d.var_plx[i]) {
      y.push_back(d.parallax.m0[i] - kFiveOverLn10 * std::log(100.0 / p));
      x.push_back(d.parallax.x[i]);
    }
  }
  for (Eigen::Index i = 0; i < d.known.size(); ++i) {
    y.push_back(d.known.m0[i] - d.mu[i]);
    x.push_back(d.known.x[i]);
  }
  t[L.alpha] = -4.0;
  t[L.beta] = -3.0;
  if (y.size() >= 2) {
    double n = static_cast<double>(y.size()), sx = 0, sy = 0, sxx = 0, sxy = 0;
    for (std::size_t i = 0; i < y.size(); ++i)
      sx += x[i], sy += y[i], sxx += x[i] * x[i], sxy += x[i] * y[i];
    double den = n * sxx - sx * sx;
    if (std::abs(den) > 1e-12) t[L.beta] = (n * sxy - sx * sy) / den;
    t[L.alpha] = (sy - t[L.beta] * sx) / n;
  } else if (y.size() == 1) {
    t[L.alpha] = y[0];
  }
  t[L.sigma] = 0.1;
  for (int g = 0; g < s.terms.n_anchors; ++g) {
    // Median-free start: mean of m0 - M over the anchor's stars.
    double sum = 0;
    int cnt = 0;
    for (Eigen::Index i = 0; i < d.anchor.size(); ++i)
      if (d.group[i] == g) sum += d.anchor.m0[i] - (t[L.alpha] + t[L.beta] * d.anchor.x[i]), ++cnt;
    t[L.anchor0 + g] = cnt ? sum / cnt : 0.0;
  }
  for (int j = 0; j < L.size; ++j) {
    const ParamSpec& p = s.params[j];
    if (p.mode != ParamMode::kFree || p.has_start) t[j] = p.value;
  }
  if (s.space == FitSpace::kHierarchical) hierarchical_start(d, s, L, t);
  return t;
}

namespace {

FitSolution solve_once(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                       const Eigen::VectorXd& start_internal, const Eigen::VectorXd* reference) {
  FitSolution sol;
  sol.theta = start_internal;
  ceres::Problem::Options po;
  po.cost_function_ownership = ceres::TAKE_OWNERSHIP;
  ceres::Problem problem(po);
  configure_problem(problem, new RelationCost(d, s, L, reference), s, L, sol.theta.data());
  ceres::Solver::Options so;
  // A few parameters and thousands of residuals: the normal equations (Jacobi-scaled) are
  // small and well conditioned, and far cheaper than a QR of the tall Jacobian.
  so.linear_solver_type = ceres::DENSE_NORMAL_CHOLESKY;
  so.max_num_iterations = s.max_iterations;
  so.function_tolerance = s.function_tolerance;
  so.gradient_tolerance = 1e-15;
  so.parameter_tolerance = s.parameter_tolerance;
  so.initial_trust_region_radius = s.initial_trust_region_radius;
  so.logging_type = ceres::SILENT;
  so.num_threads = 1;
  ceres::Solver::Summary summary;
  ceres::Solve(so, &problem, &summary);
  sol.usable = summary.IsSolutionUsable();
  sol.termination = ceres::TerminationTypeToString(summary.termination_type);
  sol.message = summary.message;
  sol.iterations = static_cast<int>(summary.iterations.size());
  sol.cost = summary.final_cost;
  sol.brief_report = summary.BriefReport();
  return sol;
}

}  // namespace

FitSolution solve_fit(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                      const Eigen::VectorXd& start) {
  if (s.space == FitSpace::kHierarchical) return solve_hierarchical(d, s, L, start);
  Eigen::VectorXd x = to_internal(start, L);
  if (!decoupled(s, L)) {
    FitSolution sol = solve_once(d, s, L, x, nullptr);
    sol.theta = to_external(sol.theta, L);
    return sol;
  }
  // Fixed point: freeze s^2 = A + B sigma^2 at the last solution, solve, repeat.
  FitSolution sol;
  int total = 0;
  for (int pass = 0; pass < 50; ++pass) {
    Eigen::VectorXd reference = x;
    sol = solve_once(d, s, L, x, &reference);
    total += sol.iterations;
    double change = (sol.theta - reference).cwiseAbs().maxCoeff();
    x = sol.theta;
    if (!sol.usable || change < 1e-11) break;
  }
  sol.iterations = total;
  sol.theta = to_external(sol.theta, L);
  return sol;
}

Eigen::VectorXd gauss_newton_start(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                                   const Eigen::VectorXd& theta) {
  if (s.space == FitSpace::kHierarchical)
    return theta;  // its quasi-Newton solver starts well from the optimum
  const Eigen::VectorXd x = to_internal(theta, L);
  const Eigen::VectorXd reference = x;
  RelationCost cost(d, s, L, decoupled(s, L) ? &reference : nullptr);
  const int n = cost.num_residuals(), P = L.size;
  Eigen::VectorXd f(n);
  Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> J(n, P);
  const double* params[] = {x.data()};
  double* jac[] = {J.data()};
  if (!cost.Evaluate(params, f.data(), jac)) return theta;
  std::vector<int> free;
  for (int j = 0; j < P; ++j)
    if (s.params[j].mode != ParamMode::kFixed) free.push_back(j);
  Eigen::MatrixXd Jf(n, static_cast<Eigen::Index>(free.size()));
  for (std::size_t k = 0; k < free.size(); ++k)
    Jf.col(static_cast<Eigen::Index>(k)) = J.col(free[k]);
  Eigen::VectorXd step = (Jf.transpose() * Jf).ldlt().solve(-Jf.transpose() * f);
  if (!step.allFinite()) return theta;
  Eigen::VectorXd out = x;
  for (std::size_t k = 0; k < free.size(); ++k) out[free[k]] += step[static_cast<Eigen::Index>(k)];
  if (L.sigma >= 0) out[L.sigma] = std::max(0.0, out[L.sigma]);
  return to_external(out, L);
}

bool fit_covariance(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                    const Eigen::VectorXd& theta, Eigen::MatrixXd& covariance) {
  if (s.space == FitSpace::kHierarchical) {
    std::vector<std::string> undetermined;
    return hierarchical_covariance(d, s, L, theta, covariance, undetermined);
  }
  Eigen::VectorXd t = to_internal(theta, L);
  const Eigen::VectorXd reference = t;
  ceres::Problem::Options po;
  po.cost_function_ownership = ceres::TAKE_OWNERSHIP;
  ceres::Problem problem(po);
  configure_problem(problem, new RelationCost(d, s, L, decoupled(s, L) ? &reference : nullptr), s,
                    L, t.data());
  // A non-finite Jacobian (a degenerate system) would reach Eigen's SVD: no covariance then.
  if (!t.allFinite()) return false;
  ceres::CRSMatrix jacobian;
  double cost = 0;
  if (!problem.Evaluate(ceres::Problem::EvaluateOptions(), &cost, nullptr, nullptr, &jacobian) ||
      !std::isfinite(cost))
    return false;
  for (double v : jacobian.values)
    if (!std::isfinite(v)) return false;
  ceres::Covariance::Options co;
  co.algorithm_type = ceres::DENSE_SVD;
  ceres::Covariance cov(co);
  std::vector<std::pair<const double*, const double*>> blocks = {{t.data(), t.data()}};
  if (!cov.Compute(blocks, &problem)) return false;
  Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> c(L.size, L.size);
  if (!cov.GetCovarianceBlock(t.data(), t.data(), c.data())) return false;
  // From sigma^2 to sigma by the delta method, d sigma = d(sigma^2) / (2 sigma); undefined at
  // sigma = 0 (the likelihood's maximum on its boundary), where that row stays NaN.
  Eigen::VectorXd scale = Eigen::VectorXd::Ones(L.size);
  scale[L.sigma] =
      theta[L.sigma] > 0 ? 0.5 / theta[L.sigma] : std::numeric_limits<double>::quiet_NaN();
  covariance = scale.asDiagonal() * c * scale.asDiagonal();
  if (s.params[L.sigma].mode == ParamMode::kFixed) {
    covariance.row(L.sigma).setZero();
    covariance.col(L.sigma).setZero();
  }
  return true;
}

}  // namespace rungcal