// SPDX-License-Identifier: MIT
#include "rungcal/plfit/model.hpp"

#include <ceres/ceres.h>

#include <cmath>
#include <limits>

#include <Eigen/Dense>

namespace rungcal {
namespace {

constexpr double kK5 = 0.2 * 2.302585092994045684;  // 0.2 ln 10
constexpr double kFiveOverLn10 = 5.0 / 2.302585092994045684;
// Normalisation residuals are sqrt(ln s^2 - ln s_min^2 + kNormShift): s_min^2 (the
// measurement variance alone) bounds s^2 below, so the root stays real.
constexpr double kNormShift = 10.0;

// One kind's residuals and their derivatives with respect to the absolute magnitude M,
// the parallax offset, the intrinsic scatter sigma, and (through s^2) the same for s^2.
struct KindTerms {
  Eigen::ArrayXd r, d_m, d_off, d_sigma;          // dr/dM, dr/doffset, dr/dsigma
  Eigen::ArrayXd s2, s2_min, ds2_m, ds2_off, ds2_sigma;
  Eigen::ArrayXd s2_base, s2_per_var;  // s^2 = s2_base + s2_per_var * sigma^2
  Eigen::ArrayXd abs_mag, predicted;
};

Eigen::ArrayXd absolute_magnitude(const FitData::Common& c, const ParameterLayout& L, const Eigen::VectorXd& t) {
  Eigen::ArrayXd m = t[L.alpha] + t[L.beta] * c.x;
  if (L.beta_long >= 0) m += t[L.beta_long] * c.xl;
  if (L.gamma >= 0) m += t[L.gamma] * c.feh;
  return m;
}

KindTerms parallax_terms(const FitData& d, FitSpace space, const ParameterLayout& L, const Eigen::VectorXd& t) {
  const auto& c = d.parallax;
  KindTerms k;
  k.abs_mag = absolute_magnitude(c, L, t);
  const double off = t[L.offset], sig2 = t[L.sigma];  // inside the solver the slot holds sigma^2
  const Eigen::ArrayXd var_tot = c.var_m + sig2;
  const Eigen::Index n = c.size();
  switch (space) {
    case FitSpace::kParallax: {
      Eigen::ArrayXd pi = (-kK5 * (c.m0 - k.abs_mag - 10.0)).exp();
      Eigen::ArrayXd kpi2 = (kK5 * pi).square();
      Eigen::ArrayXd e = d.plx - off - pi;
      k.s2 = d.var_plx + kpi2 * var_tot;
      k.s2_min = d.var_plx;
      k.s2_base = d.var_plx + kpi2 * c.var_m;
      k.s2_per_var = kpi2;
      Eigen::ArrayXd s = k.s2.sqrt();
      k.r = e / s;
      k.ds2_m = 2.0 * kK5 * kpi2 * var_tot;
      k.ds2_off = Eigen::ArrayXd::Zero(n);
      k.ds2_sigma = kpi2;
      k.d_m = -kK5 * pi / s - 0.5 * e * k.ds2_m / (s * k.s2);
      k.d_off = -1.0 / s;
      k.d_sigma = -0.5 * e * k.ds2_sigma / (s * k.s2);
      k.predicted = pi;
      break;
    }
    case FitSpace::kMagnitude: {
      Eigen::ArrayXd pc = (d.plx - off).max(1e-9);  // guarded: such stars are refused beforehand
      Eigen::ArrayXd mu = kFiveOverLn10 * (100.0 / pc).log();
      Eigen::ArrayXd e = c.m0 - mu - k.abs_mag;
      Eigen::ArrayXd vplx = kFiveOverLn10 * kFiveOverLn10 * d.var_plx / pc.square();
      k.s2 = var_tot + vplx;
      k.s2_min = c.var_m + 1e-30;  // a bound that does not move with the parameters
      k.s2_base = c.var_m + vplx;
      k.s2_per_var = Eigen::ArrayXd::Ones(n);
      Eigen::ArrayXd s = k.s2.sqrt();
      k.r = e / s;
      k.ds2_m = Eigen::ArrayXd::Zero(n);
      k.ds2_off = 2.0 * vplx / pc;
      k.ds2_sigma = Eigen::ArrayXd::Ones(n);
      k.d_m = -1.0 / s;
      k.d_off = -kFiveOverLn10 / pc / s - 0.5 * e * k.ds2_off / (s * k.s2);
      k.d_sigma = -0.5 * e * k.ds2_sigma / (s * k.s2);
      k.predicted = k.abs_mag + mu;
      break;
    }
    case FitSpace::kAbl: {
      Eigen::ArrayXd f = (kK5 * c.m0 * 1.0 - 2.0 * 2.302585092994045684).exp();  // 10^(0.2 m0 - 2)
      Eigen::ArrayXd a_model = (kK5 * k.abs_mag).exp();
      Eigen::ArrayXd e = (d.plx - off) * f - a_model;
      Eigen::ArrayXd ka2 = (kK5 * a_model).square();
      k.s2 = f.square() * d.var_plx + ka2 * var_tot;
      k.s2_min = f.square() * d.var_plx;
      k.s2_base = f.square() * d.var_plx + ka2 * c.var_m;
      k.s2_per_var = ka2;
      Eigen::ArrayXd s = k.s2.sqrt();
      k.r = e / s;
      k.ds2_m = 2.0 * kK5 * ka2 * var_tot;
      k.ds2_off = Eigen::ArrayXd::Zero(n);
      k.ds2_sigma = ka2;
      k.d_m = -kK5 * a_model / s - 0.5 * e * k.ds2_m / (s * k.s2);
      k.d_off = -f / s;
      k.d_sigma = -0.5 * e * k.ds2_sigma / (s * k.s2);
      k.predicted = a_model;
      break;
    }
  }
  return k;
}

// Known-distance stars (mu given) and anchor stars (mu a parameter) share one form:
// r = (m0 - mu - M) / s, s^2 = sigma_m^2 + sigma_mu^2 + sigma_int^2.
KindTerms magnitude_terms(const FitData::Common& c, const Eigen::ArrayXd& mu, const Eigen::ArrayXd& var_mu,
                          const ParameterLayout& L, const Eigen::VectorXd& t) {
  KindTerms k;
  const Eigen::Index n = c.size();
  k.abs_mag = absolute_magnitude(c, L, t);
  Eigen::ArrayXd e = c.m0 - mu - k.abs_mag;
  k.s2 = c.var_m + var_mu + t[L.sigma];
  k.s2_min = c.var_m + var_mu;
  k.s2_base = k.s2_min;
  k.s2_per_var = Eigen::ArrayXd::Ones(n);
  Eigen::ArrayXd s = k.s2.sqrt();
  k.r = e / s;
  k.d_m = -1.0 / s;
  k.d_off = Eigen::ArrayXd::Zero(n);
  k.ds2_m = Eigen::ArrayXd::Zero(n);
  k.ds2_off = Eigen::ArrayXd::Zero(n);
  k.ds2_sigma = Eigen::ArrayXd::Ones(n);
  k.d_sigma = -0.5 * e * k.ds2_sigma / (s * k.s2);
  k.predicted = k.abs_mag + mu;
  return k;
}

Eigen::ArrayXd anchor_mu(const FitData& d, const ParameterLayout& L, const Eigen::VectorXd& t) {
  Eigen::ArrayXd mu(d.anchor.size());
  for (Eigen::Index i = 0; i < mu.size(); ++i) mu[i] = t[L.anchor0 + d.group[i]];
  return mu;
}

std::vector<KindTerms> all_terms(const FitData& d, const FitSettings& s, const ParameterLayout& L, const Eigen::VectorXd& t) {
  std::vector<KindTerms> out;
  out.push_back(parallax_terms(d, s.space, L, t));
  out.push_back(magnitude_terms(d.known, d.mu, d.var_mu, L, t));
  out.push_back(magnitude_terms(d.anchor, anchor_mu(d, L, t), Eigen::ArrayXd::Zero(d.anchor.size()), L, t));
  return out;
}

const FitData::Common& common_of(const FitData& d, int kind) {
  return kind == 0 ? d.parallax : (kind == 1 ? d.known : d.anchor);
}

// The scatter is fitted as the variance sigma^2 >= 0: its Jacobian column does not vanish at
// sigma = 0, where a maximum-likelihood scatter often sits for small samples, and the bound
// keeps it physical. Outside the solver the slot holds sigma.
Eigen::VectorXd to_internal(const Eigen::VectorXd& t, const ParameterLayout& L) {
  Eigen::VectorXd v = t;
  v[L.sigma] = t[L.sigma] * t[L.sigma];
  return v;
}
Eigen::VectorXd to_external(const Eigen::VectorXd& v, const ParameterLayout& L) {
  Eigen::VectorXd t = v;
  t[L.sigma] = std::sqrt(std::max(0.0, v[L.sigma]));
  return t;
}

bool scatter_is_free(const FitSettings& s, const ParameterLayout& L) { return s.params[L.sigma].mode != ParamMode::kFixed; }

// The whole relation as one Ceres residual block: thousands of stars evaluated as arrays
// (vectorised), with analytic derivatives; the robust loss enters as f = sgn(r) sqrt(rho(r^2)),
// whose squares sum to the robust objective exactly.
class RelationCost final : public ceres::CostFunction {
 public:
  // reference: internal parameters at which A and B of s^2 = A + B sigma^2 are frozen for
  // the normalisation (decoupled estimator); nullptr for the full likelihood.
  RelationCost(const FitData& d, const FitSettings& s, const ParameterLayout& L, const Eigen::VectorXd* reference)
      : d_(d), s_(s), L_(L) {
    if (reference) frozen_ = all_terms(d, s, L, *reference);
    n_stars_ = static_cast<int>(d.stars());
    n_norm_ = scatter_is_free(s, L) ? n_stars_ : 0;
    for (int j = 0; j < L.size; ++j)
      if (s.params[j].mode == ParamMode::kPrior) priors_.push_back(j);
    set_num_residuals(n_stars_ + n_norm_ + static_cast<int>(priors_.size()));
    mutable_parameter_block_sizes()->push_back(L.size);
  }

  bool Evaluate(double const* const* parameters, double* residuals, double** jacobians) const override {
    Eigen::Map<const Eigen::VectorXd> t(parameters[0], L_.size);
    const Eigen::VectorXd theta = t;
    std::vector<KindTerms> kinds = all_terms(d_, s_, L_, theta);
    const int P = L_.size;
    using RowMajor = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
    Eigen::Map<RowMajor> J(jacobians && jacobians[0] ? jacobians[0] : nullptr, jacobians && jacobians[0] ? num_residuals() : 0, P);
    if (jacobians && jacobians[0]) J.setZero();
    int row = 0;
    for (int kind = 0; kind < 3; ++kind) {
      const KindTerms& k = kinds[kind];
      const FitData::Common& c = common_of(d_, kind);
      const Eigen::Index n = c.size();
      if (n == 0) continue;
      Eigen::ArrayXd f, df_dr;
      robust(k.r, f, df_dr);
      Eigen::Map<Eigen::ArrayXd>(residuals + row, n) = f;
      const bool frozen = !frozen_.empty();
      Eigen::ArrayXd norm_s2;
      if (n_norm_) {
        norm_s2 = frozen ? Eigen::ArrayXd(frozen_[kind].s2_base + frozen_[kind].s2_per_var * theta[L_.sigma]) : k.s2;
        Eigen::ArrayXd arg = (norm_s2 / k.s2_min).log() + kNormShift;
        Eigen::Map<Eigen::ArrayXd>(residuals + n_stars_ + row, n) = arg.sqrt();
      }
      if (jacobians && jacobians[0]) {
        Eigen::ArrayXd gm = df_dr * k.d_m;
        J.block(row, L_.alpha, n, 1) = gm.matrix();
        J.block(row, L_.beta, n, 1) = (gm * c.x).matrix();
        if (L_.beta_long >= 0) J.block(row, L_.beta_long, n, 1) = (gm * c.xl).matrix();
        if (L_.gamma >= 0) J.block(row, L_.gamma, n, 1) = (gm * c.feh).matrix();
        J.block(row, L_.offset, n, 1) = (df_dr * k.d_off).matrix();
        J.block(row, L_.sigma, n, 1) = (df_dr * k.d_sigma).matrix();
        if (kind == 2)
          for (Eigen::Index i = 0; i < n; ++i) J(row + i, L_.anchor0 + d_.group[i]) = gm[i];
        if (n_norm_ && frozen) {
          Eigen::ArrayXd arg = (norm_s2 / k.s2_min).log() + kNormShift;
          J.block(n_stars_ + row, L_.sigma, n, 1) = (0.5 / (arg.sqrt() * norm_s2) * frozen_[kind].s2_per_var).matrix();
        } else if (n_norm_) {
          Eigen::ArrayXd arg = (k.s2 / k.s2_min).log() + kNormShift;
          Eigen::ArrayXd g = 0.5 / (arg.sqrt() * k.s2);  // d sqrt(arg) / d s^2
          const int nr = n_stars_ + row;
          Eigen::ArrayXd gm2 = g * k.ds2_m;
          J.block(nr, L_.alpha, n, 1) = gm2.matrix();
          J.block(nr, L_.beta, n, 1) = (gm2 * c.x).matrix();
          if (L_.beta_long >= 0) J.block(nr, L_.beta_long, n, 1) = (gm2 * c.xl).matrix();
          if (L_.gamma >= 0) J.block(nr, L_.gamma, n, 1) = (gm2 * c.feh).matrix();
          J.block(nr, L_.offset, n, 1) = (g * k.ds2_off).matrix();
          J.block(nr, L_.sigma, n, 1) = (g * k.ds2_sigma).matrix();
        }
      }
      row += static_cast<int>(n);
    }
    int pr = n_stars_ + n_norm_;
    for (int j : priors_) {
      const ParamSpec& p = s_.params[j];
      residuals[pr] = (theta[j] - p.value) / p.prior_sigma;
      if (jacobians && jacobians[0]) J(pr, j) = 1.0 / p.prior_sigma;
      ++pr;
    }
    return residuals[0] == residuals[0];  // false on NaN: Ceres shortens the step
  }

 private:
  void robust(const Eigen::ArrayXd& r, Eigen::ArrayXd& f, Eigen::ArrayXd& df_dr) const {
    if (s_.loss == LossKind::kNone) {
      f = r;
      df_dr = Eigen::ArrayXd::Ones(r.size());
      return;
    }
    Eigen::ArrayXd s2 = r.square(), rho, rho1;
    evaluate_loss(s_.loss, s_.loss_scale, s2, rho, rho1);
    Eigen::ArrayXd root = rho.sqrt();
    f = (r < 0).select(-root, root);
    // d/dr sgn(r) sqrt(rho(r^2)) = rho' |r| / sqrt(rho); its limit at r = 0 is sqrt(rho'(0)).
    df_dr = (root > 1e-150).select(rho1 * r.abs() / root, rho1.sqrt());
  }

  const FitData& d_;
  const FitSettings& s_;
  const ParameterLayout& L_;
  int n_stars_ = 0, n_norm_ = 0;
  std::vector<int> priors_;
  std::vector<KindTerms> frozen_;
};

void configure_problem(ceres::Problem& problem, RelationCost* cost, const FitSettings& s, const ParameterLayout& L,
                       double* theta) {
  problem.AddResidualBlock(cost, nullptr, theta);
  if (s.params[L.sigma].mode != ParamMode::kFixed) problem.SetParameterLowerBound(theta, L.sigma, 0.0);
  std::vector<int> fixed;
  for (int j = 0; j < L.size; ++j)
    if (s.params[j].mode == ParamMode::kFixed) fixed.push_back(j);
  if (!fixed.empty()) problem.SetManifold(theta, new ceres::SubsetManifold(L.size, fixed));
}

}  // namespace

ParameterLayout ParameterLayout::for_terms(const ModelTerms& terms, const std::vector<std::string>& anchors) {
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
  L.size = next;
  return L;
}

namespace {
FitData::Common take_common(const FitData::Common& c, const std::vector<Eigen::Index>& idx) {
  FitData::Common o;
  const auto n = static_cast<Eigen::Index>(idx.size());
  o.x.resize(n), o.xl.resize(n), o.feh.resize(n), o.m0.resize(n), o.var_m.resize(n);
  for (Eigen::Index i = 0; i < n; ++i) {
    Eigen::Index j = idx[i];
    o.x[i] = c.x[j], o.xl[i] = c.xl[j], o.feh[i] = c.feh[j], o.m0[i] = c.m0[j], o.var_m[i] = c.var_m[j];
    o.row.push_back(c.row[j]);
  }
  return o;
}
Eigen::ArrayXd take_array(const Eigen::ArrayXd& a, const std::vector<Eigen::Index>& idx) {
  Eigen::ArrayXd o(static_cast<Eigen::Index>(idx.size()));
  for (std::size_t i = 0; i < idx.size(); ++i) o[static_cast<Eigen::Index>(i)] = a[idx[i]];
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
  o.parallax = take_common(parallax, p);
  o.plx = take_array(plx, p);
  o.var_plx = take_array(var_plx, p);
  o.known = take_common(known, k);
  o.mu = take_array(mu, k);
  o.var_mu = take_array(var_mu, k);
  o.anchor = take_common(anchor, a);
  for (Eigen::Index i : a) o.group.push_back(group[i]);
  return o;
}

FitData FitData::without(const std::vector<bool>& dp, const std::vector<bool>& dk, const std::vector<bool>& da) const {
  return take(kept(dp, parallax.size()), kept(dk, known.size()), kept(da, anchor.size()));
}

StarResiduals star_residuals(const FitData& d, const FitSettings& s, const ParameterLayout& L, const Eigen::VectorXd& t) {
  std::vector<KindTerms> kinds = all_terms(d, s, L, to_internal(t, L));
  StarResiduals out;
  const Eigen::Index n = d.stars();
  out.r.resize(n), out.s2.resize(n), out.model_abs_mag.resize(n), out.predicted.resize(n);
  Eigen::Index row = 0;
  for (const auto& k : kinds) {
    const Eigen::Index m = k.r.size();
    out.r.segment(row, m) = k.r;
    out.s2.segment(row, m) = k.s2;
    out.model_abs_mag.segment(row, m) = k.abs_mag;
    out.predicted.segment(row, m) = k.predicted;
    row += m;
  }
  return out;
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
    for (std::size_t i = 0; i < y.size(); ++i) sx += x[i], sy += y[i], sxx += x[i] * x[i], sxy += x[i] * y[i];
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
  return t;
}

namespace {

FitSolution solve_once(const FitData& d, const FitSettings& s, const ParameterLayout& L, const Eigen::VectorXd& start_internal,
                       const Eigen::VectorXd* reference) {
  FitSolution sol;
  sol.theta = start_internal;
  ceres::Problem::Options po;
  po.cost_function_ownership = ceres::TAKE_OWNERSHIP;
  ceres::Problem problem(po);
  configure_problem(problem, new RelationCost(d, s, L, reference), s, L, sol.theta.data());
  ceres::Solver::Options so;
  so.linear_solver_type = ceres::DENSE_QR;
  so.max_num_iterations = s.max_iterations;
  so.function_tolerance = 1e-15;
  so.gradient_tolerance = 1e-15;
  so.parameter_tolerance = 1e-13;
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

bool decoupled(const FitSettings& s, const ParameterLayout& L) {
  return scatter_is_free(s, L) && s.scatter_estimator == ScatterEstimator::kDecoupled;
}

}  // namespace

FitSolution solve_fit(const FitData& d, const FitSettings& s, const ParameterLayout& L, const Eigen::VectorXd& start) {
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

bool fit_covariance(const FitData& d, const FitSettings& s, const ParameterLayout& L, const Eigen::VectorXd& theta,
                    Eigen::MatrixXd& covariance) {
  Eigen::VectorXd t = to_internal(theta, L);
  const Eigen::VectorXd reference = t;
  ceres::Problem::Options po;
  po.cost_function_ownership = ceres::TAKE_OWNERSHIP;
  ceres::Problem problem(po);
  configure_problem(problem, new RelationCost(d, s, L, decoupled(s, L) ? &reference : nullptr), s, L, t.data());
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
  scale[L.sigma] = theta[L.sigma] > 0 ? 0.5 / theta[L.sigma] : std::numeric_limits<double>::quiet_NaN();
  covariance = scale.asDiagonal() * c * scale.asDiagonal();
  if (s.params[L.sigma].mode == ParamMode::kFixed) {
    covariance.row(L.sigma).setZero();
    covariance.col(L.sigma).setZero();
  }
  return true;
}

}  // namespace rungcal
