// SPDX-License-Identifier: MIT
#include "rungcal/plfit/joint.hpp"

#include <ceres/ceres.h>
#include <ceres/dynamic_autodiff_cost_function.h>

#include <algorithm>
#include <cmath>

#include <vector>

#include "rungcal/plfit/priors.hpp"

namespace rungcal {
namespace {

constexpr double kK5 = 0.2 * 2.302585092994045684;  // 0.2 ln 10

// One star: r = L(theta)^-1 e(theta) with C(theta) = L L^T its covariance between
// relations, written once for doubles and Ceres Jets (automatic derivatives).
struct StarResidual {
  const JointData* d;
  const JointSettings* s;
  const JointLayout* L;
  int star;

  template <typename T>
  bool operator()(T const* const* parameters, T* residuals) const {
    const T* t = parameters[0];
    const int b0 = d->first[star], K = d->first[star + 1] - b0;
    const JointStarKind kind = d->kind[star];
    std::vector<T> kpi(K), e(K), c(static_cast<std::size_t>(K * K)),
        lower(static_cast<std::size_t>(K * K), T(0.0));
    const T mu = kind == JointStarKind::kKnownDistance ? T(d->mu[star])
                 : kind == JointStarKind::kGroup       ? t[L->anchor0 + d->group[star]]
                                                       : T(0.0);
    for (int i = 0; i < K; ++i) {
      const int entry = b0 + i, r = d->relation[entry];
      T m = t[L->alpha[r]] + t[L->beta[r]] * d->x[entry];
      if (L->gamma[r] >= 0) m += t[L->gamma[r]] * d->feh[star];
      if (kind == JointStarKind::kParallax) {
        const T pi = exp(-kK5 * (d->m0[entry] - m - 10.0));
        kpi[i] = kK5 * pi;
        e[i] = d->plx[star] - t[L->offset] - pi;
      } else {
        kpi[i] = T(1.0);  // magnitude residuals: the same covariance terms, unscaled
        e[i] = d->m0[entry] - mu - m;
      }
    }
    const double shared = kind == JointStarKind::kParallax        ? d->var_plx[star]
                          : kind == JointStarKind::kKnownDistance ? d->var_mu[star]
                                                                  : 0.0;
    for (int i = 0; i < K; ++i)
      for (int j = 0; j < K; ++j) {
        double inner = d->coefficient[b0 + i] * d->coefficient[b0 + j] * d->var_ebv[star];
        const double si = s->sigma_int[d->relation[b0 + i]], sj = s->sigma_int[d->relation[b0 + j]];
        inner += i == j ? d->var_phot[b0 + i] + si * si : s->scatter_correlation * si * sj;
        c[i * K + j] = shared + kpi[i] * kpi[j] * inner;
      }
    // Cholesky C = L L^T, then forward substitution L r = e.
    for (int i = 0; i < K; ++i)
      for (int j = 0; j <= i; ++j) {
        T sum = c[i * K + j];
        for (int k = 0; k < j; ++k) sum -= lower[i * K + k] * lower[j * K + k];
        if (i == j) {
          if (!(sum > T(0.0))) return false;
          lower[i * K + i] = sqrt(sum);
        } else {
          lower[i * K + j] = sum / lower[j * K + j];
        }
      }
    for (int i = 0; i < K; ++i) {
      T sum = e[i];
      for (int k = 0; k < i; ++k) sum -= lower[i * K + k] * residuals[k];
      residuals[i] = sum / lower[i * K + i];
    }
    return true;
  }
};

// The anchors' moduli priors, whitened: W (mu - mean) with W = L^-1, L L^T their covariance
// (diagonal when they are independent), so that the squares sum to the Gaussian's -2 ln p.
struct AnchorPriors {
  int first;
  Eigen::VectorXd mean;
  Eigen::MatrixXd whitener;
  template <typename T>
  bool operator()(T const* const* parameters, T* residual) const {
    for (Eigen::Index k = 0; k < mean.size(); ++k) {
      residual[k] = T(0.0);
      for (Eigen::Index g = 0; g <= k; ++g)
        residual[k] += whitener(k, g) * (parameters[0][first + static_cast<int>(g)] - mean[g]);
    }
    return true;
  }
};

void add_anchor_priors(ceres::Problem& problem, const JointSettings& s, const JointLayout& L,
                       double* t) {
  const auto n = static_cast<Eigen::Index>(s.anchor_priors.size());
  if (n == 0) return;
  Eigen::VectorXd mean(n), sigma(n);
  for (Eigen::Index g = 0; g < n; ++g)
    mean[g] = s.anchor_priors[static_cast<std::size_t>(g)].first,
    sigma[g] = s.anchor_priors[static_cast<std::size_t>(g)].second;
  auto* prior = new ceres::DynamicAutoDiffCostFunction<AnchorPriors, 8>(
      new AnchorPriors{L.anchor0, mean, prior_whitener(sigma, s.anchor_correlation)});
  prior->AddParameterBlock(L.size);
  prior->SetNumResiduals(static_cast<int>(n));
  problem.AddResidualBlock(prior, nullptr, t);
}

void build_problem(ceres::Problem& problem, const JointData& d, const JointSettings& s,
                   const JointLayout& L, double* t, bool robust) {
  add_anchor_priors(problem, s, L, t);
  for (int star = 0; star < d.stars(); ++star) {
    auto* cost =
        new ceres::DynamicAutoDiffCostFunction<StarResidual, 8>(new StarResidual{&d, &s, &L, star});
    cost->AddParameterBlock(L.size);
    cost->SetNumResiduals(d.first[star + 1] - d.first[star]);
    ceres::LossFunction* loss = robust ? make_ceres_loss(s.loss, s.loss_scale).release() : nullptr;
    problem.AddResidualBlock(cost, loss, t);
  }
  std::vector<int> fixed;
  for (int j = 0; j < L.size; ++j)
    if (j < static_cast<int>(s.fixed.size()) && s.fixed[j]) fixed.push_back(j);
  if (!fixed.empty()) problem.SetManifold(t, new ceres::SubsetManifold(L.size, fixed));
}

}  // namespace

bool JointData::has_parallax() const {
  return std::any_of(var_plx.begin(), var_plx.end(), [](double v) { return v > 0; }) ||
         std::any_of(group_plx.begin(), group_plx.end(),
                     [](const FitData::GroupParallax& g) { return g.var > 0; });
}

JointData JointData::take(const std::vector<int>& stars) const {
  JointData o;
  o.relations = relations;
  for (int star : stars) {
    o.first.push_back(static_cast<int>(o.relation.size()));
    for (int e = first[star]; e < first[star + 1]; ++e) {
      o.relation.push_back(relation[e]);
      o.x.push_back(x[e]);
      o.m0.push_back(m0[e]);
      o.var_phot.push_back(var_phot[e]);
      o.coefficient.push_back(coefficient[e]);
    }
    o.plx.push_back(plx[star]);
    o.var_plx.push_back(var_plx[star]);
    o.var_ebv.push_back(var_ebv[star]);
    o.feh.push_back(feh[star]);
    if (!var_feh.empty()) o.var_feh.push_back(var_feh[star]);
    o.kind.push_back(kind[star]);
    o.group.push_back(group[star]);
    o.mu.push_back(mu[star]);
    o.var_mu.push_back(var_mu[star]);
    o.row.push_back(row[star]);
    if (!weight.empty()) o.weight.push_back(weight[static_cast<std::size_t>(star)]);
  }
  o.first.push_back(static_cast<int>(o.relation.size()));
  o.group_plx = group_plx;
  return o;
}

JointData JointData::take_counted(const std::vector<int>& stars) const {
  std::vector<int> draws(static_cast<std::size_t>(this->stars()), 0);
  for (int star : stars) ++draws[static_cast<std::size_t>(star)];
  std::vector<int> distinct;
  std::vector<double> counts;
  for (int i = 0; i < this->stars(); ++i)
    if (const int n = draws[static_cast<std::size_t>(i)]; n > 0)
      distinct.push_back(i), counts.push_back(n * weight_of(i));
  JointData o = take(distinct);
  o.weight = std::move(counts);
  return o;
}

JointLayout JointLayout::make(const std::vector<std::string>& names,
                              const std::vector<bool>& metallicity, bool shared_slope,
                              const std::vector<std::string>& anchors) {
  JointLayout L;
  int next = 0;
  int shared = -1;
  for (std::size_t r = 0; r < names.size(); ++r) {
    L.alpha.push_back(next++);
    L.names.push_back("alpha_" + names[r]);
    if (shared_slope && shared >= 0) {
      L.beta.push_back(shared);
    } else {
      L.beta.push_back(next++);
      L.names.push_back(shared_slope ? "beta" : "beta_" + names[r]);
      if (shared_slope) shared = L.beta.back();
    }
    if (metallicity[r]) {
      L.gamma.push_back(next++);
      L.names.push_back("gamma_" + names[r]);
    } else {
      L.gamma.push_back(-1);
    }
  }
  L.offset = next++;
  L.names.push_back("parallax_offset_mas");
  L.anchor0 = next;
  L.n_anchors = static_cast<int>(anchors.size());
  for (const auto& a : anchors) {
    L.names.push_back("mu_" + a);
    ++next;
  }
  L.size = next;
  return L;
}

JointSolution solve_joint(const JointData& d, const JointSettings& s, const JointLayout& L,
                          const Eigen::VectorXd& start, bool with_covariance) {
  JointSolution sol;
  sol.theta = start;
  sol.entries = static_cast<int>(d.relation.size());
  {
    ceres::Problem problem;
    build_problem(problem, d, s, L, sol.theta.data(), true);
    ceres::Solver::Options so;
    so.linear_solver_type = ceres::DENSE_NORMAL_CHOLESKY;
    so.function_tolerance = 1e-15;
    so.gradient_tolerance = 1e-15;
    so.parameter_tolerance = 1e-13;
    so.max_num_iterations = 200;
    so.logging_type = ceres::SILENT;
    ceres::Solver::Summary summary;
    ceres::Solve(so, &problem, &summary);
    sol.usable = summary.IsSolutionUsable();
    sol.message = summary.message;
    sol.termination = ceres::TerminationTypeToString(summary.termination_type);
    sol.iterations = static_cast<int>(summary.iterations.size());
    sol.passes = 1;
  }
  if (!with_covariance) return sol;
  // chi^2 of the plain (non-robust) whitened residuals, and the covariance.
  Eigen::VectorXd t = sol.theta;
  ceres::Problem plain;
  build_problem(plain, d, s, L, t.data(), false);
  double cost = 0;
  plain.Evaluate(ceres::Problem::EvaluateOptions(), &cost, nullptr, nullptr, nullptr);
  sol.chi2 = 2.0 * cost;
  ceres::Problem robust;
  build_problem(robust, d, s, L, t.data(), true);
  // A degenerate system (an absurd value somewhere in the data) gives a non-finite Jacobian,
  // which Eigen's SVD inside the covariance does not survive: no covariance then.
  ceres::CRSMatrix jacobian;
  robust.Evaluate(ceres::Problem::EvaluateOptions(), nullptr, nullptr, nullptr, &jacobian);
  if (!std::isfinite(sol.chi2) || !t.allFinite() ||
      !std::all_of(jacobian.values.begin(), jacobian.values.end(),
                   [](double v) { return std::isfinite(v); }))
    return sol;
  ceres::Covariance::Options co;
  co.algorithm_type = ceres::DENSE_SVD;
  ceres::Covariance cov(co);
  std::vector<std::pair<const double*, const double*>> blocks = {{t.data(), t.data()}};
  if (cov.Compute(blocks, &robust)) {
    Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> c(L.size, L.size);
    sol.covariance_ok = cov.GetCovarianceBlock(t.data(), t.data(), c.data());
    sol.covariance = c;
  }
  return sol;
}

}  // namespace rungcal
