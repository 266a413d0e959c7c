// SPDX-License-Identifier: MIT
// The relation's residuals per fit space and their Ceres cost (model_parts.hpp), and
// star_residuals (model.hpp).
#include <ceres/ceres.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include <Eigen/Dense>

#include "rungcal/core/simd.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/plfit/model_parts.hpp"
#include "rungcal/plfit/priors.hpp"

namespace rungcal {
namespace model_parts {
namespace {

constexpr double kK5 = 0.2 * 2.302585092994045684;  // 0.2 ln 10
// Normalisation residuals are sqrt(ln s^2 - ln s_min^2 + kNormShift): s_min^2 (the
// measurement variance alone) bounds s^2 below, so the root stays real.
constexpr double kNormShift = 10.0;

// The parameters as plain numbers, unpacked once per evaluation.
struct Params {
  double alpha, beta, beta_long, gamma, offset, var;  // var = sigma^2 (the solver's slot)
};

Params unpack(const ParameterLayout& L, const double* t) {
  return {t[L.alpha],
          t[L.beta],
          L.beta_long >= 0 ? t[L.beta_long] : 0.0,
          L.gamma >= 0 ? t[L.gamma] : 0.0,
          t[L.offset],
          t[L.sigma]};
}

// One star's residual r and its derivatives with respect to the absolute magnitude M, the
// parallax offset and sigma^2, and s^2 = base + per_var sigma^2 with the same derivatives.
struct Term {
  double r, d_m, d_off, d_var;
  double s2, s2_min, ds2_m, ds2_off, s2_base, s2_per_var;
  double abs_mag, predicted;
};

// r = e / s: dr = de / s - e ds^2 / (2 s^3).
inline void finish(Term& k, double e, double de_m, double de_off) {
  const double inv_s = 1.0 / std::sqrt(k.s2), h = 0.5 * e * inv_s * inv_s * inv_s;
  k.r = e * inv_s;
  k.d_m = de_m * inv_s - h * k.ds2_m;
  k.d_off = de_off * inv_s - h * k.ds2_off;
  k.d_var = -h * k.s2_per_var;
}

inline Term parallax_term(FitSpace space, double m0, double var_m, double plx, double var_plx,
                          double abs_mag, const Params& p) {
  Term k;
  k.abs_mag = abs_mag;
  switch (space) {
    case FitSpace::kHierarchical:  // shown by its parallax-space residual
    case FitSpace::kParallax: {
      const double pi = std::exp(-kK5 * (m0 - abs_mag - 10.0)), kpi2 = kK5 * kK5 * pi * pi;
      k.s2_base = var_plx + kpi2 * var_m;
      k.s2_per_var = kpi2;
      k.s2 = k.s2_base + kpi2 * p.var;
      k.s2_min = var_plx;
      k.ds2_m = 2.0 * kK5 * kpi2 * (var_m + p.var);
      k.ds2_off = 0.0;
      k.predicted = pi;
      finish(k, plx - p.offset - pi, -kK5 * pi, -1.0);
      return k;
    }
    case FitSpace::kMagnitude: {
      const double pc = std::max(plx - p.offset, 1e-9);  // such stars are refused beforehand
      const double mu = kFiveOverLn10 * std::log(100.0 / pc);
      const double vplx = kFiveOverLn10 * kFiveOverLn10 * var_plx / (pc * pc);
      k.s2_base = var_m + vplx;
      k.s2_per_var = 1.0;
      k.s2 = k.s2_base + p.var;
      k.s2_min = var_m + 1e-30;  // a bound that does not move with the parameters
      k.ds2_m = 0.0;
      k.ds2_off = 2.0 * vplx / pc;
      k.predicted = abs_mag + mu;
      finish(k, m0 - mu - abs_mag, -1.0, -kFiveOverLn10 / pc);
      return k;
    }
    case FitSpace::kAbl: {
      const double f = std::exp(kK5 * m0 - 2.0 * 2.302585092994045684);  // 10^(0.2 m0 - 2)
      const double a_model = std::exp(kK5 * abs_mag), ka2 = kK5 * kK5 * a_model * a_model;
      k.s2_base = f * f * var_plx + ka2 * var_m;
      k.s2_per_var = ka2;
      k.s2 = k.s2_base + ka2 * p.var;
      k.s2_min = f * f * var_plx;
      k.ds2_m = 2.0 * kK5 * ka2 * (var_m + p.var);
      k.ds2_off = 0.0;
      k.predicted = a_model;
      finish(k, (plx - p.offset) * f - a_model, -kK5 * a_model, -f);
      return k;
    }
  }
  return k;
}

// Known-distance stars (mu given) and anchor stars (mu a parameter) share one form:
// r = (m0 - mu - M) / s, s^2 = sigma_m^2 + sigma_mu^2 + sigma_int^2.
inline Term magnitude_term(double m0, double var_m, double mu, double var_mu, double abs_mag,
                           const Params& p) {
  Term k;
  k.abs_mag = abs_mag;
  k.s2_base = k.s2_min = var_m + var_mu;
  k.s2_per_var = 1.0;
  k.s2 = k.s2_base + p.var;
  k.ds2_m = k.ds2_off = 0.0;
  k.predicted = abs_mag + mu;
  finish(k, m0 - mu - abs_mag, -1.0, 0.0);
  return k;
}

const FitData::Common& common_of(const FitData& d, int kind) {
  return kind == 0 ? d.parallax : (kind == 1 ? d.known : d.anchor);
}

// Calls f(kind, i, term) for every star, in the order parallax, known, anchor.
template <typename F>
void for_each_star(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                   const double* t, F&& f) {
  const Params p = unpack(L, t);
  for (int kind = 0; kind < 3; ++kind) {
    const FitData::Common& c = common_of(d, kind);
    for (Eigen::Index i = 0; i < c.size(); ++i) {
      const double m = p.alpha + p.beta * c.x[i] + p.beta_long * c.xl[i] + p.gamma * c.feh[i];
      Term k = kind == 0 ? parallax_term(s.space, c.m0[i], c.var_m[i], d.plx[i], d.var_plx[i], m, p)
               : kind == 1
                   ? magnitude_term(c.m0[i], c.var_m[i], d.mu[i], d.var_mu[i], m, p)
                   : magnitude_term(c.m0[i], c.var_m[i], t[L.anchor0 + d.group[i]], 0.0, m, p);
      f(kind, i, k);
    }
  }
}

bool scatter_is_free(const FitSettings& s, const ParameterLayout& L) {
  return s.params[L.sigma].mode != ParamMode::kFixed;
}

// The common case in one vectorisable loop: parallax calibrators only, parallax space, no
// period break, no loss or the Huber loss, scatter not fitted. The same residual and
// derivatives as parallax_term + finish + the Huber branch of RelationCost::robust, written
// branch-free over plain arrays (exp_vectorisable for the photometric parallax), each
// Jacobian row filled in full. Returns false when a residual is not finite.
struct FastParallaxInput {
  const double *x, *feh, *m0, *var_m, *plx, *var_plx, *sqrt_weight;  // feh, sqrt_weight may be null
  Eigen::Index n;
  double alpha, beta, gamma, offset, var;
  bool huber;
  double huber_scale;
  int P, col_alpha, col_beta, col_gamma, col_offset, col_sigma;  // col_gamma -1 when absent
};

// Per-thread scratch of the kernel below: a missing [Fe/H] or weight array reads as zeros
// or ones, and the Jacobian's per-star factors wait here for the row writes.
struct FastScratch {
  std::vector<double> zeros, ones, g_m, g_off, g_var;
  void size_for(std::size_t n) {
    if (zeros.size() >= n) return;
    zeros.assign(n, 0.0), ones.assign(n, 1.0);
    g_m.resize(n), g_off.resize(n), g_var.resize(n);
  }
};

// Residuals, and the Jacobian when J is given, in two passes: the per-star arithmetic over
// plain arrays, which the compiler runs 4 stars to an AVX2 instruction (the loop has no
// pointer tests, branches or strided stores), then the row-major Jacobian rows Ceres wants.
RUNGCAL_VECTOR_CLONES
bool fast_parallax_residuals(const FastParallaxInput& in, double* __restrict res,
                             double* __restrict J) {
  thread_local FastScratch scratch;
  const Eigen::Index n = in.n;
  scratch.size_for(static_cast<std::size_t>(n));
  const double* __restrict x = in.x;
  const double* __restrict feh = in.feh ? in.feh : scratch.zeros.data();
  const double* __restrict m0 = in.m0;
  const double* __restrict var_m = in.var_m;
  const double* __restrict plx = in.plx;
  const double* __restrict var_plx = in.var_plx;
  const double* __restrict weight = in.sqrt_weight ? in.sqrt_weight : scratch.ones.data();
  double* __restrict g_m = scratch.g_m.data();
  double* __restrict g_off = scratch.g_off.data();
  double* __restrict g_var = scratch.g_var.data();
  const double alpha = in.alpha, beta = in.beta, gamma = in.gamma, offset = in.offset, var = in.var,
               a = in.huber_scale;
  // Without Huber the scale is infinite: no residual is ever outside it.
  const double outer_from = in.huber ? a : std::numeric_limits<double>::infinity();
#pragma omp simd
  for (Eigen::Index i = 0; i < n; ++i) {
    const double m = alpha + beta * x[i] + gamma * feh[i];
    const double pi = exp_vectorisable(-kK5 * (m0[i] - m - 10.0));
    const double kpi2 = kK5 * kK5 * pi * pi;
    const double vm = var_m[i] + var;
    const double s2 = var_plx[i] + kpi2 * vm;
    const double ds2_m = 2.0 * kK5 * kpi2 * vm;
    const double e = plx[i] - offset - pi;
    const double inv_s = 1.0 / std::sqrt(s2);
    const double h = 0.5 * e * inv_s * inv_s * inv_s;
    const double r = e * inv_s;
    // Huber as f = sgn(r) sqrt(rho(r^2)): r inside the scale, sgn(r) sqrt(2 a |r| - a^2) out.
    const double ar = std::abs(r);
    const double q = std::sqrt(std::max(2.0 * a * ar - a * a, 1e-300));
    const bool outer = ar > outer_from;
    const double f = outer ? std::copysign(q, r) : r;
    // A blend, not a select: a division only one branch used would stay a branch (it may
    // trap), and the loop would not vectorise.
    const double df = 1.0 + (outer ? 1.0 : 0.0) * (a / q - 1.0);
    const double sw = weight[i];
    res[i] = sw * f;
    g_m[i] = sw * df * (-kK5 * pi * inv_s - h * ds2_m);
    g_off[i] = -sw * df * inv_s;
    g_var[i] = -sw * df * h * kpi2;
  }
  if (J) {
    const int P = in.P, ca = in.col_alpha, cb = in.col_beta, cg = in.col_gamma, co = in.col_offset,
              cs = in.col_sigma;
    for (Eigen::Index i = 0; i < n; ++i) {
      double* row = J + i * P;
      row[ca] = g_m[i];
      row[cb] = g_m[i] * x[i];
      if (cg >= 0) row[cg] = g_m[i] * feh[i];
      row[co] = g_off[i];
      row[cs] = g_var[i];
    }
  }
  for (Eigen::Index i = 0; i < n; ++i)
    if (!std::isfinite(res[i])) return false;
  return true;
}

}  // namespace

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

bool decoupled(const FitSettings& s, const ParameterLayout& L) {
  return scatter_is_free(s, L) && s.scatter_estimator == ScatterEstimator::kDecoupled;
}

RelationCost::RelationCost(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                           const Eigen::VectorXd* reference)
    : d_(d), s_(s), L_(L) {
  n_stars_ = static_cast<int>(d.stars());
  n_norm_ = scatter_is_free(s, L) ? n_stars_ : 0;
  if (reference && n_norm_) {
    frozen_base_.resize(n_stars_), frozen_per_var_.resize(n_stars_);
    int row = 0;
    for_each_star(d, s, L, reference->data(), [&](int, Eigen::Index, const Term& k) {
      frozen_base_[row] = k.s2_base, frozen_per_var_[row] = k.s2_per_var;
      ++row;
    });
  }
  priors_ = prior_rows(s, L);
  fast_ = d.known.size() == 0 && d.anchor.size() == 0 && s.space == FitSpace::kParallax &&
          n_norm_ == 0 && L.beta_long < 0 && L.size == L.anchor0 &&
          (s.loss == LossKind::kNone || s.loss == LossKind::kHuber);
  set_num_residuals(n_stars_ + n_norm_ + static_cast<int>(priors_.size()));
  mutable_parameter_block_sizes()->push_back(L.size);
}

bool RelationCost::Evaluate(double const* const* parameters, double* residuals,
                            double** jacobians) const {
  const double* t = parameters[0];
  const int P = L_.size;
  double* J = jacobians ? jacobians[0] : nullptr;
  if (fast_) return evaluate_fast(t, residuals, J);
  if (J) std::fill(J, J + static_cast<std::size_t>(num_residuals()) * P, 0.0);
  const bool frozen = !frozen_base_.empty();
  bool finite = true;
  int row = 0;
  for_each_star(d_, s_, L_, t, [&](int kind, Eigen::Index i, const Term& k) {
    const FitData::Common& c = common_of(d_, kind);
    const double sw = c.sqrt_weight.size() ? c.sqrt_weight[i] : 1.0;
    double f, df_dr;
    robust(k.r, f, df_dr);
    residuals[row] = sw * f;
    finite = finite && std::isfinite(f);
    double norm_s2 = 0, n = 0;
    if (n_norm_) {
      norm_s2 = frozen ? frozen_base_[row] + frozen_per_var_[row] * t[L_.sigma] : k.s2;
      n = std::sqrt(std::log(norm_s2 / k.s2_min) + kNormShift);
      residuals[n_stars_ + row] = sw * n;
    }
    if (J) {
      double* Jr = J + static_cast<std::size_t>(row) * P;
      const double gm = sw * df_dr * k.d_m;
      Jr[L_.alpha] = gm;
      Jr[L_.beta] = gm * c.x[i];
      if (L_.beta_long >= 0) Jr[L_.beta_long] = gm * c.xl[i];
      if (L_.gamma >= 0) Jr[L_.gamma] = gm * c.feh[i];
      Jr[L_.offset] = sw * df_dr * k.d_off;
      Jr[L_.sigma] = sw * df_dr * k.d_var;
      if (kind == 2) Jr[L_.anchor0 + d_.group[i]] = gm;
      if (n_norm_) {
        double* Jn = J + static_cast<std::size_t>(n_stars_ + row) * P;
        const double g = sw * 0.5 / (n * norm_s2);  // d sqrt(ln s^2 + K) / d s^2
        if (frozen) {
          Jn[L_.sigma] = g * frozen_per_var_[row];
        } else {
          const double gm2 = g * k.ds2_m;
          Jn[L_.alpha] = gm2;
          Jn[L_.beta] = gm2 * c.x[i];
          if (L_.beta_long >= 0) Jn[L_.beta_long] = gm2 * c.xl[i];
          if (L_.gamma >= 0) Jn[L_.gamma] = gm2 * c.feh[i];
          Jn[L_.offset] = g * k.ds2_off;
          Jn[L_.sigma] = g * k.s2_per_var;
          if (kind == 2) Jn[L_.anchor0 + d_.group[i]] = gm2;
        }
      }
    }
    ++row;
  });
  int pr = n_stars_ + n_norm_;
  for (const PriorRow& prior : priors_) {
    residuals[pr] = prior_residual(prior, s_, t);
    if (J)
      for (std::size_t k = 0; k < prior.params.size(); ++k)
        J[static_cast<std::size_t>(pr) * P + prior.params[k]] = prior.weights[k];
    ++pr;
  }
  return finite;  // false on NaN: Ceres shortens the step
}

bool RelationCost::evaluate_fast(const double* t, double* residuals, double* J) const {
  const FitData::Common& c = d_.parallax;
  const int P = L_.size;
  FastParallaxInput in{c.x.data(),
                       L_.gamma >= 0 ? c.feh.data() : nullptr,
                       c.m0.data(),
                       c.var_m.data(),
                       d_.plx.data(),
                       d_.var_plx.data(),
                       c.sqrt_weight.size() ? c.sqrt_weight.data() : nullptr,
                       c.size(),
                       t[L_.alpha],
                       t[L_.beta],
                       L_.gamma >= 0 ? t[L_.gamma] : 0.0,
                       t[L_.offset],
                       t[L_.sigma],
                       s_.loss == LossKind::kHuber,
                       s_.loss_scale,
                       P,
                       L_.alpha,
                       L_.beta,
                       L_.gamma,
                       L_.offset,
                       L_.sigma};
  const bool finite = fast_parallax_residuals(in, residuals, J);
  int pr = n_stars_;
  for (const PriorRow& row : priors_) {
    residuals[pr] = prior_residual(row, s_, t);
    if (J) {
      std::fill(J + static_cast<std::size_t>(pr) * P, J + static_cast<std::size_t>(pr + 1) * P,
                0.0);
      for (std::size_t k = 0; k < row.params.size(); ++k)
        J[static_cast<std::size_t>(pr) * P + row.params[k]] = row.weights[k];
    }
    ++pr;
  }
  return finite;
}

void RelationCost::robust(double r, double& f, double& df_dr) const {
  if (s_.loss == LossKind::kNone) {
    f = r, df_dr = 1.0;
    return;
  }
  if (s_.loss == LossKind::kHuber) {
    // Written with selects: about a third of the stars sit past the scale, unpredictably.
    const double a = s_.loss_scale, ar = std::abs(r);
    const double q = std::sqrt(std::max(2.0 * a * ar - a * a, 1e-300));
    const bool inner = ar <= a;
    f = inner ? r : std::copysign(q, r);
    df_dr = inner ? 1.0 : a / q;
    return;
  }
  double rho = 0.0, rho1 = 1.0;
  loss_terms(s_.loss, s_.loss_scale, r * r, rho, rho1);
  const double root = std::sqrt(rho);
  f = r < 0 ? -root : root;
  // d/dr sgn(r) sqrt(rho(r^2)) = rho' |r| / sqrt(rho); its limit at r = 0 is sqrt(rho'(0)).
  df_dr = root > 1e-150 ? rho1 * std::abs(r) / root : std::sqrt(rho1);
}

void configure_problem(ceres::Problem& problem, RelationCost* cost, const FitSettings& s,
                       const ParameterLayout& L, double* theta) {
  problem.AddResidualBlock(cost, nullptr, theta);
  if (s.params[L.sigma].mode != ParamMode::kFixed)
    problem.SetParameterLowerBound(theta, L.sigma, 0.0);
  std::vector<int> fixed;
  for (int j = 0; j < L.size; ++j)
    if (s.params[j].mode == ParamMode::kFixed) fixed.push_back(j);
  if (!fixed.empty()) problem.SetManifold(theta, new ceres::SubsetManifold(L.size, fixed));
}

}  // namespace model_parts

using namespace model_parts;

StarResiduals star_residuals(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                             const Eigen::VectorXd& t) {
  StarResiduals out;
  const Eigen::Index n = d.stars();
  out.r.resize(n), out.s2.resize(n), out.model_abs_mag.resize(n), out.predicted.resize(n);
  Eigen::Index row = 0;
  const Eigen::VectorXd internal = to_internal(t, L);
  // The hierarchical model has no residual of its own: its stars are shown by their
  // parallax-space residual, beside their membership probability.
  FitSettings shown = s;
  if (s.space == FitSpace::kHierarchical) {
    shown.space = FitSpace::kParallax;
    out.membership = hierarchical_membership(d, s, L, t);
  }
  for_each_star(d, shown, L, internal.data(), [&](int, Eigen::Index, const Term& k) {
    out.r[row] = k.r, out.s2[row] = k.s2, out.model_abs_mag[row] = k.abs_mag,
    out.predicted[row] = k.predicted;
    ++row;
  });
  return out;
}

}  // namespace rungcal
