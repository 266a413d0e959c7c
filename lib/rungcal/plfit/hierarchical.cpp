// SPDX-License-Identifier: MIT
#include "rungcal/plfit/hierarchical.hpp"

#include <ceres/gradient_problem.h>
#include <ceres/gradient_problem_solver.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <map>
#include <mutex>
#include <numbers>

#include <Eigen/Dense>

#include "rungcal/plfit/priors.hpp"

namespace rungcal {
namespace {

constexpr double kLn10 = 2.302585092994045684;
constexpr double kC = 0.2 * kLn10;  // -d ln(parallax) / d mu
constexpr double kLog2Pi = 1.8378770664093454836;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// How a reported parameter maps to the solver's coordinate.
enum class Scale { kLinear, kLog, kLogPlusOne, kLogit };

Scale scale_of(const ParameterLayout& L, int j) {
  if (j == L.sigma || j == L.distance_scale || j == L.distance_exponent || j == L.feh_spread || j == L.outlier_width ||
      j == L.blend_scale)
    return Scale::kLog;
  if (j == L.distance_power) return Scale::kLogPlusOne;
  if (j == L.outlier || j == L.blend) return Scale::kLogit;
  return Scale::kLinear;
}

// The solver never reaches an edge of a domain; a value on it (a scatter fixed or started at
// 0) is moved just inside.
double to_internal(Scale s, double v) {
  switch (s) {
    case Scale::kLinear: return v;
    case Scale::kLog: return std::log(std::max(v, 1e-12));
    case Scale::kLogPlusOne: return std::log(std::max(v + 1.0, 1e-12));
    case Scale::kLogit: {
      const double f = std::clamp(v, 1e-12, 1.0 - 1e-12);
      return std::log(f / (1.0 - f));
    }
  }
  return v;
}
double to_external(Scale s, double x) {
  switch (s) {
    case Scale::kLinear: return x;
    case Scale::kLog: return std::exp(x);
    case Scale::kLogPlusOne: return std::exp(x) - 1.0;
    case Scale::kLogit: return 1.0 / (1.0 + std::exp(-x));
  }
  return x;
}
// d external / d internal, at the external value v.
double slope_of(Scale s, double v) {
  switch (s) {
    case Scale::kLinear: return 1.0;
    case Scale::kLog: return v;
    case Scale::kLogPlusOne: return v + 1.0;
    case Scale::kLogit: return v * (1.0 - v);
  }
  return 1.0;
}

Eigen::VectorXd internal_of(const ParameterLayout& L, const Eigen::VectorXd& theta) {
  Eigen::VectorXd x(L.size);
  for (int j = 0; j < L.size; ++j) x[j] = to_internal(scale_of(L, j), theta[j]);
  return x;
}
Eigen::VectorXd external_of(const ParameterLayout& L, const Eigen::VectorXd& x) {
  Eigen::VectorXd t(L.size);
  for (int j = 0; j < L.size; ++j) t[j] = to_external(scale_of(L, j), x[j]);
  return t;
}

// Nodes with ln w_k + x_k^2 folded in, per order, built once.
struct Quadrature {
  std::vector<double> nodes, log_weight;  // nodes scaled by sqrt(2); ln w_k + x_k^2
};
const Quadrature& quadrature(int n) {
  static std::mutex mutex;
  static std::map<int, Quadrature> cache;
  std::lock_guard<std::mutex> lock(mutex);
  auto it = cache.find(n);
  if (it != cache.end()) return it->second;
  Quadrature q;
  std::vector<double> x, w;
  gauss_hermite(n, x, w);
  for (std::size_t k = 0; k < x.size(); ++k) {
    q.nodes.push_back(std::numbers::sqrt2 * x[k]);
    q.log_weight.push_back(std::log(w[k]) + x[k] * x[k]);
  }
  return cache.emplace(n, std::move(q)).first->second;
}

// ln of one component's likelihood and its derivatives: with respect to the absolute
// magnitude M, the magnitude variance V, the parallax offset and the prior's ln L, k, a.
struct Component {
  double log_l = 0, d_m = 0, d_v = 0, d_off = 0, d_log_scale = 0, d_power = 0, d_exponent = 0;
  double d_blend_scale = 0;  // the blend component's only
  double d_prior_mu = 0;     // E[d ln p(mu) / d mu]: the histogram grid moves with alpha
};

// A component's magnitude term at one residual r = m - mu - M: ln p(r) (normalised) and its
// derivatives in r (first and second), in the magnitude variance V and in the blend scale.
struct MagnitudePoint {
  double log_p = 0, d_r = 0, d2_r = 0, d_v = 0, d_scale = 0;
};

// N(r | 0, V): the member and the broad outlier component.
struct GaussianMagnitude {
  double var, log_norm;
  explicit GaussianMagnitude(double v) : var(v), log_norm(-0.5 * (kLog2Pi + std::log(v))) {}
  MagnitudePoint at(double r) const {
    const double z = r / var;
    return {log_norm - 0.5 * r * z, -z, -1.0 / var, 0.5 * (z * z - 1.0 / var), 0.0};
  }
  static constexpr double kWidthFactor = 1.0;  // the quadrature's width in curvature widths
};

// The blend component's magnitude term: the exponentially modified Gaussian
// (blend_log_density) or its Gamma(2) counterpart (blend_rising_log_density).
struct BlendMagnitude {
  double var, scale;
  bool rising;
  BlendMagnitude(double v, double s, BlendComponent kind) : var(v), scale(s), rising(kind == BlendComponent::kRising) {}
  MagnitudePoint at(double r) const {
    const BlendDensity b = rising ? blend_rising_log_density(r, var, scale) : blend_log_density(r, var, scale);
    return {b.log_density, b.d_r, b.d2_r, b.d_var, b.d_scale};
  }
  // The exponential tail reaches further than the curvature at the mode says: 24 nodes at
  // 1.3 curvature widths integrate the blend component to 1e-7 to 1e-9 relative (against
  // scipy.integrate.quad, noisy and precise parallaxes), at 1.0 only to 1e-5 to 1e-6; the
  // variance V + s^2 as the width is worse (1e-2). Where the tail spans the prior's range
  // (noisy parallaxes, s >= 0.45 mag) 24 nodes leave 1e-6, so the blend takes more (blend_nodes).
  static constexpr double kWidthFactor = 1.3;
};

// The blend component's node count: 5/3 of the member's (40 for 24), which brings
// tests/hierarchical_test.cpp's -ln L to within 5e-8 of a 64-node rule (3.6e-6 with 24).
int blend_nodes(int member_nodes) { return std::min(128, member_nodes * 5 / 3); }

// The mu integral of a parallax star's component (see hierarchical.hpp), whose magnitude
// term is `mag` (GaussianMagnitude or BlendMagnitude). m_shift: the model's apparent
// magnitude less mu (M, or M - shift for the outlier component).
// d_bins (histogram prior): d ln L / d eta_j, written (size B - 1).
template <class Magnitude>
Component integrate_parallax(double m, const Magnitude& mag, double plx, double var_plx, double m_shift, double offset,
                             const DistancePriorShape& prior, const Quadrature& q, double& mode_cache,
                             double* d_bins) {
  // The mode by safeguarded Newton steps: the exact curvature where it is negative enough,
  // else its expected (Fisher) part, which is always negative.
  auto curvature = [&](double mu, double& slope, double& width_curvature) {
    const DistancePriorTerms pr = prior.at(mu);
    const double pt = std::exp(-kC * (mu - 10.0)), e = plx - pt - offset;
    const MagnitudePoint mp = mag.at(m - mu - m_shift);  // d r / d mu = -1
    slope = pr.d_mu - mp.d_r - e * kC * pt / var_plx;
    // The magnitude terms are log-concave (-d2_r > 0), so `fisher` stays positive.
    const double fisher = -mp.d2_r + kC * kC * pt * pt / var_plx - std::min(pr.d2_mu, 0.0);
    const double exact = -mp.d2_r + kC * kC * pt * (pt - e) / var_plx - pr.d2_mu;
    // The quadrature's width must be a smooth function of the parameters: a width that
    // jumps where `exact` crosses 0.2 fisher makes -ln L jump by the quadrature's error, and
    // the Hessian's differences then saw negative curvature in flat directions (the
    // covariance of 1% of 300-star mocks failed). A smooth maximum of the two instead.
    const double floor = 0.2 * fisher, gap = exact - floor;
    width_curvature = 0.5 * (exact + floor + std::sqrt(gap * gap + 0.01 * fisher * fisher));
    return exact > floor ? exact : fisher;
  };
  double mu = std::isfinite(mode_cache) ? mode_cache : m - m_shift;
  double slope = 0, h = 1, width_h = 1;
  for (int it = 0; it < 60; ++it) {
    h = curvature(mu, slope, width_h);
    const double step = std::clamp(slope / h, -1.0, 1.0);
    mu = std::clamp(mu + step, -10.0, 60.0);
    if (std::abs(step) < 1e-10) break;
  }
  curvature(mu, slope, width_h);
  mode_cache = mu;
  const double width = Magnitude::kWidthFactor / std::sqrt(width_h);
  const double norm = -0.5 * (kLog2Pi + std::log(var_plx));  // the magnitude term is normalised in `mag`
  // Two passes: the log terms and their maximum, then the normalised weights' sums.
  const std::size_t n = q.nodes.size();
  double terms[128];
  double top = -std::numeric_limits<double>::infinity();
  Component c;
  double s_m = 0, s_v = 0, s_off = 0, s_l = 0, s_k = 0, s_a = 0, s_b = 0, s_p = 0, total = 0;
  double e_of[128];
  MagnitudePoint mp_of[128];
  DistancePriorTerms pr_of[128];
  // The histogram's responsibilities per node, kept for the log-weights' derivatives.
  thread_local std::vector<double> resp;
  int lo_of[128], hi_of[128];
  if (prior.histogram) resp.resize(n * kHistogramWindow);
  for (std::size_t k = 0; k < n; ++k) {
    const double muk = mu + width * q.nodes[k];
    pr_of[k] = prior.histogram ? prior.histogram_at(muk, lo_of[k], hi_of[k], resp.data() + k * kHistogramWindow)
                               : prior.at(muk);
    const double pt = std::exp(-kC * (muk - 10.0));
    mp_of[k] = mag.at(m - muk - m_shift);
    e_of[k] = plx - pt - offset;
    terms[k] = q.log_weight[k] + pr_of[k].log_density + mp_of[k].log_p - 0.5 * e_of[k] * e_of[k] / var_plx;
    top = std::max(top, terms[k]);
  }
  for (std::size_t k = 0; k < n; ++k) {
    const double w = std::exp(terms[k] - top);
    total += w;
    s_m -= w * mp_of[k].d_r;  // d/dM = -d/dr
    s_v += w * mp_of[k].d_v;
    s_b += w * mp_of[k].d_scale;
    s_off += w * e_of[k];
    s_l += w * pr_of[k].d_log_scale;
    s_k += w * pr_of[k].d_power;
    s_a += w * pr_of[k].d_exponent;
    s_p += w * pr_of[k].d_mu;
  }
  const double inv = 1.0 / total;
  if (prior.histogram && d_bins) {
    // d ln L / d eta_j = E[r_j] - w_j over the normalised integrand.
    for (std::size_t j = 1; j < prior.weight.size(); ++j) d_bins[j - 1] = -prior.weight[j];
    for (std::size_t k = 0; k < n; ++k) {
      const double wk = std::exp(terms[k] - top) * inv;
      const double* r = resp.data() + k * kHistogramWindow;
      for (int j = std::max(lo_of[k], 1); j <= hi_of[k]; ++j) d_bins[j - 1] += wk * r[j - lo_of[k]];
    }
  }
  c.log_l = std::log(std::numbers::sqrt2 * width) + top + std::log(total) + norm;
  c.d_m = s_m * inv;
  c.d_v = s_v * inv;
  c.d_blend_scale = s_b * inv;
  c.d_off = s_off * inv / var_plx;
  c.d_log_scale = s_l * inv;
  c.d_power = s_k * inv;
  c.d_exponent = s_a * inv;
  c.d_prior_mu = s_p * inv;
  return c;
}

// A component's magnitude term for a star whose distance modulus is given (known, or an
// anchor's): p(m - mu - M).
template <class Magnitude>
Component given_modulus(double m, const Magnitude& mag, double mu, double m_shift) {
  const MagnitudePoint p = mag.at(m - mu - m_shift);
  Component c;
  c.log_l = p.log_p;
  c.d_m = -p.d_r;
  c.d_v = p.d_v;
  c.d_blend_scale = p.d_scale;
  return c;
}

// Gradient accumulators in the natural parameters.
struct Gradient {
  double alpha = 0, beta = 0, beta_long = 0, gamma = 0, offset = 0, var_int = 0, outlier = 0;
  double log_scale = 0, power = 0, exponent = 0, feh_mean = 0, feh_var = 0, outlier_shift = 0, outlier_wide = 0;
  double blend = 0, blend_scale = 0;
  std::vector<double> anchor, bins;
};

class Evaluator {
 public:
  Evaluator(const FitData& d, const FitSettings& s, const ParameterLayout& L)
      : d_(d), s_(s), L_(L), q_(quadrature(s.hierarchical.quadrature_nodes)),
        q_blend_(quadrature(blend_nodes(s.hierarchical.quadrature_nodes))), priors_(prior_rows(s, L)) {
    // outlier_fraction = 0 fixed: no mixture at all, not one with a vanishing weight.
    mixture_ = L.outlier >= 0 && !(s.params[static_cast<std::size_t>(L.outlier)].mode == ParamMode::kFixed &&
                                   s.params[static_cast<std::size_t>(L.outlier)].value == 0.0);
    // Likewise blend_fraction = 0 fixed: no blend component.
    blends_ = L.blend >= 0 && !(s.params[static_cast<std::size_t>(L.blend)].mode == ParamMode::kFixed &&
                                s.params[static_cast<std::size_t>(L.blend)].value == 0.0);
    mode_member_.assign(static_cast<std::size_t>(d.parallax.size()), kNaN);
    mode_outlier_.assign(static_cast<std::size_t>(d.parallax.size()), kNaN);
    mode_blend_.assign(static_cast<std::size_t>(d.parallax.size()), kNaN);
  }


  // -ln L with priors, and its gradient in internal coordinates (full length).
  double evaluate(const Eigen::VectorXd& x, Eigen::VectorXd* grad, Eigen::ArrayXd* membership = nullptr) {
    const Eigen::VectorXd t = external_of(L_, x);
    const HierarchicalSettings& h = s_.hierarchical;
    const double alpha = t[L_.alpha], beta = t[L_.beta], beta_long = L_.beta_long >= 0 ? t[L_.beta_long] : 0.0;
    const double gamma = L_.gamma >= 0 ? t[L_.gamma] : 0.0, offset = t[L_.offset];
    const double sigma = t[L_.sigma], var_int = sigma * sigma;
    const double f = mixture_ ? t[L_.outlier] : 0.0;
    const double log_f = std::log(f), log_1f = std::log1p(-f);
    const double fb = blends_ ? t[L_.blend] : 0.0, blend_scale = blends_ ? t[L_.blend_scale] : 1.0;
    const double blend_min = h.blend_min_mag;
    const double log_fb = std::log(fb), log_1fb = std::log1p(-fb);
    const bool feh_errors = L_.feh_mean >= 0;
    const double mu_z = feh_errors ? t[L_.feh_mean] : 0.0, tau2 = feh_errors ? t[L_.feh_spread] * t[L_.feh_spread] : 0.0;
    DistancePriorShape prior;
    if (L_.distance_scale >= 0 && d_.parallax.size() > 0)
      prior = DistancePriorShape::make(t[L_.distance_scale], t[L_.distance_power], t[L_.distance_exponent]);
    const auto H = static_cast<std::size_t>(L_.distance_bins);
    if (L_.distance_bin0 >= 0)
      prior = DistancePriorShape::make_histogram(histogram_start_at(h, alpha), h.histogram_step,
                                                 t.data() + L_.distance_bin0, L_.distance_bins + 1);
    bins_member_.assign(H, 0.0), bins_outlier_.assign(H, 0.0), bins_blend_.assign(H, 0.0);
    const double width = L_.outlier_width >= 0 ? t[L_.outlier_width] : h.outlier_mag_width;
    const double wide = width * width, shift = L_.outlier_shift >= 0 ? t[L_.outlier_shift] : h.outlier_mag_shift;
    const double plx_factor2 = h.outlier_parallax_factor * h.outlier_parallax_factor;

    const int n_anchors = (L_.outlier >= 0 ? L_.outlier : L_.size) - L_.anchor0;  // the layout's, not the settings'
    // The components' weights: (1 - f)(1 - f_b), f and (1 - f) f_b.
    const double log_w_member = (mixture_ ? log_1f : 0.0) + (blends_ ? log_1fb : 0.0);
    const double log_w_blend = (mixture_ ? log_1f : 0.0) + log_fb;
    Gradient g;
    g.anchor.assign(static_cast<std::size_t>(n_anchors), 0.0);
    g.bins.assign(H, 0.0);
    double log_l = 0;
    Eigen::Index out_row = 0;
    for (int kind = 0; kind < 3; ++kind) {
      const FitData::Common& c = kind == 0 ? d_.parallax : (kind == 1 ? d_.known : d_.anchor);
      for (Eigen::Index i = 0; i < c.size(); ++i, ++out_row) {
        const double w = c.weight.size() ? c.weight[i] : 1.0;
        // [Fe/H]: its latent true value marginalised (Kelly 2007).
        double zbar = c.feh[i], wz = 0, dz_mean = 0, dz_tau2 = 0, dwz_tau2 = 0;
        if (feh_errors) {
          const double s2 = c.var_feh.size() ? c.var_feh[i] : 0.0, den = tau2 + s2, dz = c.feh[i] - mu_z;
          zbar = (tau2 * c.feh[i] + s2 * mu_z) / den;
          wz = tau2 * s2 / den;
          dz_mean = s2 / den;
          dz_tau2 = s2 * dz / (den * den);
          dwz_tau2 = s2 * s2 / (den * den);
          log_l += w * -0.5 * (dz * dz / den + kLog2Pi + std::log(den));
          g.feh_mean += w * dz / den;
          g.feh_var += w * 0.5 * (dz * dz - den) / (den * den);
        }
        const double M = alpha + beta * c.x[i] + beta_long * c.xl[i] + gamma * zbar;
        const double V = c.var_m[i] + var_int + gamma * gamma * wz;
        Component member, outlier, blend;
        if (kind == 0) {
          const std::size_t k = static_cast<std::size_t>(i);
          member = integrate_parallax(c.m0[i], GaussianMagnitude(V), d_.plx[i], d_.var_plx[i], M, offset, prior, q_,
                                      mode_member_[k], bins_member_.data());
          if (mixture_)
            outlier = integrate_parallax(c.m0[i], GaussianMagnitude(V + wide), d_.plx[i], plx_factor2 * d_.var_plx[i],
                                         M - shift, offset, prior, q_, mode_outlier_[k], bins_outlier_.data());
          if (blends_)
            blend = integrate_parallax(c.m0[i], BlendMagnitude(V, blend_scale, h.blends), d_.plx[i], d_.var_plx[i],
                                       M - blend_min, offset, prior, q_blend_, mode_blend_[k], bins_blend_.data());
        } else {
          const double mu = kind == 1 ? d_.mu[i] : t[L_.anchor0 + d_.group[i]];
          const double var_mu = kind == 1 ? d_.var_mu[i] : 0.0;
          member = given_modulus(c.m0[i], GaussianMagnitude(V + var_mu), mu, M);
          if (mixture_) outlier = given_modulus(c.m0[i], GaussianMagnitude(V + var_mu + wide), mu, M - shift);
          if (blends_) blend = given_modulus(c.m0[i], BlendMagnitude(V + var_mu, blend_scale, h.blends), mu, M - blend_min);
        }
        // The mixture: q, q_out and q_blend are each component's posterior probability.
        double li = member.log_l, q = 1.0, q_out = 0.0, q_blend = 0.0;
        if (mixture_ || blends_) {
          const double a = log_w_member + member.log_l;
          const double b = mixture_ ? log_f + outlier.log_l : -std::numeric_limits<double>::infinity();
          const double e = blends_ ? log_w_blend + blend.log_l : -std::numeric_limits<double>::infinity();
          const double top = std::max({a, b, e});
          li = top + std::log(std::exp(a - top) + std::exp(b - top) + std::exp(e - top));
          q = std::exp(a - li), q_out = std::exp(b - li), q_blend = std::exp(e - li);
        }
        if (mixture_) {
          g.outlier += w * (q_out / f - (q + q_blend) / (1.0 - f));
          // The outlier magnitude is mu + M - shift with variance V + width^2.
          g.outlier_shift -= w * q_out * outlier.d_m;
          g.outlier_wide += w * q_out * outlier.d_v;
        }
        if (blends_) {
          g.blend += w * (q_blend / fb - q / (1.0 - fb));
          g.blend_scale += w * q_blend * blend.d_blend_scale;
        }
        if (membership) (*membership)[out_row] = q;
        log_l += w * li;
        auto mix = [&](double Component::*field) {
          return q * member.*field + q_out * outlier.*field + q_blend * blend.*field;
        };
        const double dm = mix(&Component::d_m), dv = mix(&Component::d_v);
        g.alpha += w * dm;
        g.beta += w * dm * c.x[i];
        g.beta_long += w * dm * c.xl[i];
        g.gamma += w * (dm * zbar + dv * 2.0 * gamma * wz);
        g.var_int += w * dv;
        g.feh_mean += w * dm * gamma * dz_mean;
        g.feh_var += w * (dm * gamma * dz_tau2 + dv * gamma * gamma * dwz_tau2);
        if (kind == 0) {
          g.offset += w * mix(&Component::d_off);
          g.log_scale += w * mix(&Component::d_log_scale);
          g.power += w * mix(&Component::d_power);
          g.exponent += w * mix(&Component::d_exponent);
          if (L_.distance_bin0 >= 0) g.alpha += w * mix(&Component::d_prior_mu);
          for (std::size_t j = 0; j < H; ++j)
            g.bins[j] += w * (q * bins_member_[j] + (mixture_ ? q_out * bins_outlier_[j] : 0.0) +
                              (blends_ ? q_blend * bins_blend_[j] : 0.0));
        }
        if (kind == 2) g.anchor[static_cast<std::size_t>(d_.group[i])] += w * dm;  // d/dmu_g = d/dM
      }
    }
    double value = -log_l;
    Eigen::VectorXd gext = Eigen::VectorXd::Zero(L_.size);
    gext[L_.alpha] = g.alpha, gext[L_.beta] = g.beta, gext[L_.offset] = g.offset;
    if (L_.beta_long >= 0) gext[L_.beta_long] = g.beta_long;
    if (L_.gamma >= 0) gext[L_.gamma] = g.gamma;
    gext[L_.sigma] = g.var_int * 2.0 * sigma;  // d/dsigma
    for (int a = 0; a < n_anchors; ++a) gext[L_.anchor0 + a] = g.anchor[static_cast<std::size_t>(a)];
    if (L_.outlier >= 0) gext[L_.outlier] = g.outlier;
    if (L_.outlier_shift >= 0) gext[L_.outlier_shift] = g.outlier_shift;
    if (L_.outlier_width >= 0) gext[L_.outlier_width] = g.outlier_wide * 2.0 * width;
    if (L_.blend >= 0) gext[L_.blend] = g.blend, gext[L_.blend_scale] = g.blend_scale;
    if (L_.distance_scale >= 0) {
      gext[L_.distance_scale] = g.log_scale / t[L_.distance_scale];
      gext[L_.distance_power] = g.power;
      gext[L_.distance_exponent] = g.exponent;
    }
    if (feh_errors) {
      gext[L_.feh_mean] = g.feh_mean;
      gext[L_.feh_spread] = g.feh_var * 2.0 * t[L_.feh_spread];
    }
    for (std::size_t j = 0; j < H; ++j) gext[L_.distance_bin0 + static_cast<int>(j)] = g.bins[j];
    gext = -gext;
    // The histogram's random-walk hyperprior on its log-weights (eta_0 = 0).
    for (std::size_t j = 0; j < H; ++j) {
      const double below = j ? t[L_.distance_bin0 + static_cast<int>(j) - 1] : 0.0;
      const double z = (t[L_.distance_bin0 + static_cast<int>(j)] - below) / h.histogram_walk_sigma;
      value += 0.5 * z * z;
      gext[L_.distance_bin0 + static_cast<int>(j)] += z / h.histogram_walk_sigma;
      if (j) gext[L_.distance_bin0 + static_cast<int>(j) - 1] -= z / h.histogram_walk_sigma;
    }
    // Gaussian priors, on the reported parameters.
    for (const PriorRow& row : priors_) {
      const double z = prior_residual(row, s_, t.data());
      value += 0.5 * z * z;
      for (std::size_t k = 0; k < row.params.size(); ++k) gext[row.params[k]] += z * row.weights[k];
    }
    if (grad) {
      grad->resize(L_.size);
      for (int j = 0; j < L_.size; ++j) (*grad)[j] = gext[j] * slope_of(scale_of(L_, j), t[j]);
    }
    return value;
  }

 private:
  const FitData& d_;
  const FitSettings& s_;
  const ParameterLayout& L_;
  const Quadrature& q_;
  const Quadrature& q_blend_;
  std::vector<PriorRow> priors_;
  std::vector<double> mode_member_, mode_outlier_, mode_blend_;  // each star's last mode: the next start
  std::vector<double> bins_member_, bins_outlier_, bins_blend_;  // one star's histogram-weight derivatives
  bool mixture_ = true, blends_ = false;
};

// The free parameters as the solver's vector: x_free = base + P y with P the preconditioner
// (identity when there is none), so the solver's gradient is P^T g.
class FreeProblem final : public ceres::FirstOrderFunction {
 public:
  FreeProblem(Evaluator& e, const Eigen::VectorXd& x0, std::vector<int> free, const Eigen::MatrixXd* metric)
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
    for (std::size_t k = 0; k < free_.size(); ++k) x[free_[k]] += step[static_cast<Eigen::Index>(k)];
    return x;
  }

 private:
  Evaluator& e_;
  Eigen::VectorXd x0_;
  std::vector<int> free_;
  const Eigen::MatrixXd* metric_;
};

// The Hessian of -ln L over the free parameters `free`, in the solver's coordinates:
// fourth-order central differences of the analytic gradient, symmetrised.
Eigen::MatrixXd internal_hessian(Evaluator& e, const Eigen::VectorXd& x, const std::vector<int>& free) {
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
std::shared_ptr<const Eigen::MatrixXd> metric_from_hessian(const Eigen::MatrixXd& H, const std::vector<int>& measured,
                                                          const std::vector<int>& free) {
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> es(H);
  if (es.info() != Eigen::Success) return nullptr;
  const Eigen::MatrixXd block = es.eigenvectors() * es.eigenvalues().cwiseMax(1.0).cwiseSqrt().cwiseInverse().asDiagonal();
  auto position = [&](int j) {
    return static_cast<Eigen::Index>(std::find(free.begin(), free.end(), j) - free.begin());
  };
  const auto F = static_cast<Eigen::Index>(free.size());
  auto P = std::make_shared<Eigen::MatrixXd>(Eigen::MatrixXd::Identity(F, F));
  for (std::size_t a = 0; a < measured.size(); ++a)
    for (std::size_t b = 0; b < measured.size(); ++b)
      (*P)(position(measured[a]), position(measured[b])) = block(static_cast<Eigen::Index>(a), static_cast<Eigen::Index>(b));
  return P;
}

std::vector<int> free_parameters(const FitSettings& s, const ParameterLayout& L) {
  std::vector<int> free;
  for (int j = 0; j < L.size; ++j)
    if (s.params[static_cast<std::size_t>(j)].mode != ParamMode::kFixed) free.push_back(j);
  return free;
}

}  // namespace

HierarchicalValue hierarchical_value(const FitData& data, const FitSettings& settings, const ParameterLayout& layout,
                                     const Eigen::VectorXd& theta) {
  Evaluator e(data, settings, layout);
  HierarchicalValue v;
  v.neg_log_likelihood = e.evaluate(internal_of(layout, theta), &v.gradient);
  v.finite = std::isfinite(v.neg_log_likelihood) && v.gradient.allFinite();
  return v;
}

FitSolution solve_hierarchical(const FitData& data, const FitSettings& settings, const ParameterLayout& layout,
                               const Eigen::VectorXd& start) {
  Evaluator e(data, settings, layout);
  const Eigen::VectorXd x0 = internal_of(layout, start);
  std::vector<int> free = free_parameters(settings, layout);
  FitSolution sol;
  sol.theta = start;
  // The preconditioner applies when it was made for these free parameters.
  const Eigen::MatrixXd* metric =
      settings.preconditioner && settings.preconditioner->rows() == static_cast<Eigen::Index>(free.size())
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
  so.line_search_direction_type = ceres::BFGS;  // a handful of parameters: a dense inverse Hessian is cheap
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
  sol.theta = external_of(layout, fn->expand(p.data()));
  for (int j = 0; j < layout.size; ++j)
    if (settings.params[static_cast<std::size_t>(j)].mode == ParamMode::kFixed) sol.theta[j] = start[j];
  sol.usable = p.empty() || summary.IsSolutionUsable();
  sol.termination = ceres::TerminationTypeToString(summary.termination_type);
  sol.message = summary.message;
  sol.iterations = static_cast<int>(summary.iterations.size());
  sol.cost = summary.final_cost;
  sol.brief_report = summary.BriefReport();
  if (!std::isfinite(sol.cost) || !sol.theta.allFinite()) sol.usable = false;
  return sol;
}

bool hierarchical_covariance(const FitData& data, const FitSettings& settings, const ParameterLayout& layout,
                             const Eigen::VectorXd& theta, Eigen::MatrixXd& covariance,
                             std::vector<std::string>& undetermined,
                             std::shared_ptr<const Eigen::MatrixXd>* preconditioner) {
  const int P = layout.size;
  covariance = Eigen::MatrixXd::Zero(P, P);
  std::vector<int> free;
  for (int j : free_parameters(settings, layout)) {
    // On the edge of the domain: the likelihood's maximum is not an interior point there.
    // Without outliers their component's shape has nothing to fit either.
    const bool no_outliers = layout.outlier >= 0 && theta[layout.outlier] < 1e-3;
    const bool no_blends = layout.blend >= 0 && theta[layout.blend] < 1e-3;
    const bool edge = (j == layout.sigma && theta[j] < 1e-3) ||
                      (no_outliers && (j == layout.outlier || j == layout.outlier_shift || j == layout.outlier_width)) ||
                      (no_blends && (j == layout.blend || j == layout.blend_scale));
    if (edge) {
      undetermined.push_back(layout.names[static_cast<std::size_t>(j)]);
      covariance(j, j) = kNaN;
    } else {
      free.push_back(j);
    }
  }
  if (free.empty()) return true;
  Evaluator e(data, settings, layout);
  const Eigen::VectorXd x = internal_of(layout, theta);
  const auto F = static_cast<Eigen::Index>(free.size());
  const Eigen::MatrixXd H = internal_hessian(e, x, free);
  if (!H.allFinite()) return false;
  if (preconditioner) *preconditioner = metric_from_hessian(H, free, free_parameters(settings, layout));
  Eigen::LLT<Eigen::MatrixXd> llt(H);
  if (llt.info() != Eigen::Success) return false;
  const Eigen::MatrixXd C = llt.solve(Eigen::MatrixXd::Identity(F, F));
  for (Eigen::Index a = 0; a < F; ++a)
    for (Eigen::Index b = 0; b < F; ++b) {
      const int i = free[static_cast<std::size_t>(a)], j = free[static_cast<std::size_t>(b)];
      covariance(i, j) = slope_of(scale_of(layout, i), theta[i]) * C(a, b) * slope_of(scale_of(layout, j), theta[j]);
    }
  return true;
}

Eigen::ArrayXd hierarchical_membership(const FitData& data, const FitSettings& settings, const ParameterLayout& layout,
                                       const Eigen::VectorXd& theta) {
  Evaluator e(data, settings, layout);
  Eigen::ArrayXd q = Eigen::ArrayXd::Ones(data.stars());
  e.evaluate(internal_of(layout, theta), nullptr, &q);
  return q;
}

}  // namespace rungcal
