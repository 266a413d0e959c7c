// SPDX-License-Identifier: MIT
#pragma once
// The hierarchical likelihood's kernel (hierarchical.hpp, joint_hierarchical.hpp): one star's
// integral over its latent distance modulus, for each mixture component's magnitude term.
// Internal to plfit: the single-relation and the joint likelihoods share it.

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <vector>

#include "rungcal/plfit/blend_density.hpp"
#include "rungcal/plfit/distance_prior.hpp"
#include "rungcal/plfit/model.hpp"

namespace rungcal::hier {

inline constexpr double kLn10 = 2.302585092994045684;
inline constexpr double kC = 0.2 * kLn10;  // -d ln(parallax) / d mu
inline constexpr double kLog2Pi = 1.8378770664093454836;

// Nodes with ln w_k + x_k^2 folded in, per order, built once.
struct Quadrature {
  std::vector<double> nodes, log_weight;  // nodes scaled by sqrt(2); ln w_k + x_k^2
};
// The n-node rule, built once per n (thread-safe).
const Quadrature& quadrature(int n);

// What a likelihood keeps between evaluations: its quadrature rules (the member's and the
// blend's, blend_nodes) and, per star, each component's last mode, the next one's start.
// The histogram weights' derivatives are one star's at a time (integrate_parallax's d_bins).
struct StarIntegrals {
  StarIntegrals(int nodes, std::size_t stars);
  const Quadrature& member_rule;
  const Quadrature& blend_rule;
  std::vector<double> mode_member, mode_outlier, mode_blend;
  std::vector<double> bins_member, bins_outlier, bins_blend;
  void clear_bins(std::size_t bins) {
    bins_member.assign(bins, 0.0), bins_outlier.assign(bins, 0.0), bins_blend.assign(bins, 0.0);
  }
};

// Whether the mixture component whose fraction is parameter j is in the model: a fraction
// fixed at 0 removes it (no component with a vanishing weight); j < 0: not in the layout.
inline bool component_on(const std::vector<ParamSpec>& params, int j) {
  return j >= 0 && !(params[static_cast<std::size_t>(j)].mode == ParamMode::kFixed &&
                     params[static_cast<std::size_t>(j)].value == 0.0);
}

// ln of one component's likelihood and its derivatives: with respect to the absolute
// magnitude M, the magnitude variance V, the parallax offset, the prior's ln L, k, a and the
// parallax term's variance (d_var_plx: the outlier component's fitted factor).
struct Component {
  double log_l = 0, d_m = 0, d_v = 0, d_off = 0, d_log_scale = 0, d_power = 0, d_exponent = 0;
  double d_var_plx = 0;
  double d_blend_scale = 0;  // the blend component's only
  // The coloured blend component's only (ColouredBlendMagnitude): d/d kappa, D and t.
  double d_blend_kappa = 0, d_blend_curvature = 0, d_blend_tilt = 0;
  double d_prior_mu = 0;  // E[d ln p(mu) / d mu]: the histogram grid moves with alpha
};

// A component's magnitude term at one residual r = m - mu - M: ln p(r) (normalised) and its
// derivatives in r (first and second), in the magnitude variance V and in the blend scale.
struct MagnitudePoint {
  double log_p = 0, d_r = 0, d2_r = 0, d_v = 0, d_scale = 0;
  double d_kappa = 0, d_curvature = 0, d_tilt = 0;  // ColouredBlendMagnitude's only
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
  static constexpr bool kColoured = false;
};

// The blend component's magnitude term: the exponentially modified Gaussian
// (blend_log_density) or its Gamma(2) counterpart (blend_rising_log_density).
struct BlendMagnitude {
  BlendLaw law;
  BlendMagnitude(double v, double s, BlendComponent kind)
      : law(v, s, kind == BlendComponent::kRising) {}
  MagnitudePoint at(double r) const {
    const BlendDensity b = law.at(r);
    return {b.log_density, b.d_r, b.d2_r, b.d_var, b.d_scale};
  }
  // The exponential tail reaches further than the curvature at the mode says: 24 nodes at
  // 1.3 curvature widths integrate the blend component to 1e-7 to 1e-9 relative (against
  // scipy.integrate.quad, noisy and precise parallaxes), at 1.0 only to 1e-5 to 1e-6; the
  // variance V + s^2 as the width is worse (1e-2). Where the tail spans the prior's range
  // (noisy parallaxes, s >= 0.45 mag) 24 nodes leave 1e-6, so the blend takes more (blend_nodes).
  static constexpr double kWidthFactor = 1.3;
  static constexpr bool kColoured = false;
};

// A blend whose brightening differs between the joint fit's relations
// (coloured_blend_log_density): BlendMagnitude's term with the colour residual's terms.
struct ColouredBlendMagnitude {
  ColouredBlendLaw law;
  ColouredBlendMagnitude(double v, double s, BlendComponent kind, const BlendColour& c)
      : law(v, s, c, kind == BlendComponent::kRising) {}
  MagnitudePoint at(double r) const {
    const ColouredBlendDensity b = law.at(r);
    return {b.log_density, b.d_r, b.d2_r, b.d_var, b.d_scale, b.d_kappa, b.d_curvature, b.d_tilt};
  }
  static constexpr double kWidthFactor = BlendMagnitude::kWidthFactor;
  static constexpr bool kColoured = true;
};

// The blend component's node count: 5/3 of the member's (40 for 24), which brings
// tests/hierarchical_test.cpp's -ln L to within 5e-8 of a 64-node rule (3.6e-6 with 24).
inline int blend_nodes(int member_nodes) { return std::min(128, member_nodes * 5 / 3); }

// The mu integral of a parallax star's component (see hierarchical.hpp), whose magnitude
// term is `mag` (GaussianMagnitude or BlendMagnitude). m_shift: the model's apparent
// magnitude less mu (M, or M - shift for the outlier component).
// d_bins (histogram prior): d ln L / d eta_j, written (size B - 1).
// parallax_power k: the parallax term is (e^2 / var_plx)^k N(e | 0, var_plx) / (2k - 1)!!
// (outlier_parallax_power: 1 rising, 2 quartic). The mode and width are the Gaussian part's,
// and the factor e^2k, nearly a polynomial in mu across that width, rides on the nodes:
// Gauss-Hermite integrates a polynomial times the Gaussian exactly.
template <class Magnitude>
Component integrate_parallax(double m, const Magnitude& mag, double plx, double var_plx,
                             double m_shift, double offset, const DistancePriorShape& prior,
                             const Quadrature& q, double& mode_cache, double* d_bins,
                             int parallax_power = 0) {
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
    // Newton converges quadratically here: after a step below 1e-7 the mode is known to
    // about 1e-14, and the next step would only confirm it.
    if (std::abs(step) < 1e-7) break;
  }
  curvature(mu, slope, width_h);
  mode_cache = mu;
  const double width = Magnitude::kWidthFactor / std::sqrt(width_h);
  // The magnitude term is normalised in `mag`; ln 3 is the quartic law's (2k - 1)!!.
  const double norm =
      -0.5 * (kLog2Pi + std::log(var_plx)) - outlier_parallax_log_norm(parallax_power);
  // Two passes: the log terms and their maximum, then the normalised weights' sums.
  const std::size_t n = q.nodes.size();
  double terms[128];
  double top = -std::numeric_limits<double>::infinity();
  Component c;
  double s_m = 0, s_v = 0, s_off = 0, s_l = 0, s_k = 0, s_a = 0, s_b = 0, s_p = 0, total = 0;
  double s_kappa = 0, s_curv = 0, s_tilt = 0, s_rise = 0, s_e2 = 0;
  double e_of[128];
  MagnitudePoint mp_of[128];
  DistancePriorTerms pr_of[128];
  // The histogram's responsibilities per node, kept for the log-weights' derivatives.
  thread_local std::vector<double> resp;
  int lo_of[128], hi_of[128];
  double resp_scale[128];
  if (prior.histogram) resp.resize(n * kHistogramWindow);
  for (std::size_t k = 0; k < n; ++k) {
    const double muk = mu + width * q.nodes[k];
    pr_of[k] = prior.histogram
                   ? prior.histogram_at(muk, lo_of[k], hi_of[k], resp.data() + k * kHistogramWindow,
                                        resp_scale[k])
                   : prior.at(muk);
    const double pt = std::exp(-kC * (muk - 10.0));
    mp_of[k] = mag.at(m - muk - m_shift);
    e_of[k] = plx - pt - offset;
    terms[k] =
        q.log_weight[k] + pr_of[k].log_density + mp_of[k].log_p - 0.5 * e_of[k] * e_of[k] / var_plx;
    if (parallax_power) terms[k] += parallax_power * std::log(e_of[k] * e_of[k] / var_plx);
    top = std::max(top, terms[k]);
  }
  for (std::size_t k = 0; k < n; ++k) {
    const double w = terms[k] = std::exp(terms[k] - top);  // the node's weight, kept for d_bins
    total += w;
    s_m -= w * mp_of[k].d_r;  // d/dM = -d/dr
    s_v += w * mp_of[k].d_v;
    s_b += w * mp_of[k].d_scale;
    s_off += w * e_of[k];
    s_e2 += w * e_of[k] * e_of[k];
    // d ln e^2k / d offset = -2k / e; the weight holds e^2k, so the product vanishes at e = 0.
    if (parallax_power && e_of[k] != 0.0) s_rise -= 2.0 * parallax_power * w / e_of[k];
    s_l += w * pr_of[k].d_log_scale;
    s_k += w * pr_of[k].d_power;
    s_a += w * pr_of[k].d_exponent;
    s_p += w * pr_of[k].d_mu;
    if constexpr (Magnitude::kColoured) {
      s_kappa += w * mp_of[k].d_kappa;
      s_curv += w * mp_of[k].d_curvature;
      s_tilt += w * mp_of[k].d_tilt;
    }
  }
  const double inv = 1.0 / total;
  if (prior.histogram && d_bins) {
    // d ln L / d eta_j = E[r_j] - w_j over the normalised integrand.
    for (std::size_t j = 1; j < prior.weight.size(); ++j) d_bins[j - 1] = -prior.weight[j];
    for (std::size_t k = 0; k < n; ++k) {
      const double wk = terms[k] * inv * resp_scale[k];
      const double* r = resp.data() + k * kHistogramWindow;
      for (int j = std::max(lo_of[k], 1); j <= hi_of[k]; ++j) d_bins[j - 1] += wk * r[j - lo_of[k]];
    }
  }
  c.log_l = std::log(std::numbers::sqrt2 * width) + top + std::log(total) + norm;
  c.d_m = s_m * inv;
  c.d_v = s_v * inv;
  c.d_blend_scale = s_b * inv;
  c.d_off = (s_off / var_plx + s_rise) * inv;
  // d/d var of -e^2 / (2 var) - ln(var) / 2, and of k ln(e^2 / var).
  c.d_var_plx = (0.5 * s_e2 * inv / var_plx - (0.5 + parallax_power)) / var_plx;
  c.d_log_scale = s_l * inv;
  c.d_power = s_k * inv;
  c.d_exponent = s_a * inv;
  c.d_prior_mu = s_p * inv;
  c.d_blend_kappa = s_kappa * inv;
  c.d_blend_curvature = s_curv * inv;
  c.d_blend_tilt = s_tilt * inv;
  return c;
}

// The outlier component's magnitude shape for a parallax star: the configured width^2 and
// shift, or under the rising and quartic parallax laws (`gross`) none, the member's magnitude
// term (its parallax is what is off: OutlierParallaxLaw::kRising, kQuartic). `fitted`: whether the
// shape's parameters enter.
struct ParallaxOutlierShape {
  double wide = 0, shift = 0;
  bool fitted = false;
};
inline ParallaxOutlierShape parallax_outlier_shape(bool gross, double wide, double shift) {
  return gross ? ParallaxOutlierShape{} : ParallaxOutlierShape{wide, shift, true};
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
  c.d_blend_kappa = p.d_kappa;
  c.d_blend_curvature = p.d_curvature;
  c.d_blend_tilt = p.d_tilt;
  return c;
}

// A cluster member's own parallax at its cluster's modulus mu (a parameter, so no integral):
// ln N(pi | 10^(-0.2 (mu - 10)) + offset, var), with its derivatives in mu and the offset.
struct ParallaxAtModulus {
  double log_l = 0, d_mu = 0, d_off = 0, d_var = 0;  // d_var: d/d var
};
ParallaxAtModulus parallax_at_modulus(double plx, double var, double mu, double offset);

// The same term under the law of power k (outlier_parallax_power):
// ln[(r^2 / var)^k N(r | 0, var) / (2k - 1)!!].
ParallaxAtModulus powered_parallax_at_modulus(double plx, double var, double mu, double offset,
                                              int power);

// A member's own parallax in its mixture: the member and blend components take it with its
// error, the outlier component with the error widened by `outlier_factor2`'s root and the law
// of power `power` (outlier_parallax_power).
struct OwnParallax {
  ParallaxAtModulus member, outlier;
  OwnParallax(double plx, double var, double outlier_factor2, double mu, double offset,
              int power = 0)
      : member(parallax_at_modulus(plx, var, mu, offset)),
        outlier(powered_parallax_at_modulus(plx, outlier_factor2 * var, mu, offset, power)) {}
  void add_to(Component& m, Component& out, Component& blend) const {
    m.log_l += member.log_l, out.log_l += outlier.log_l, blend.log_l += member.log_l;
  }
  // d ln L_i / d mu and / d offset, with the components' posterior weights.
  double d_mu(double q, double q_out, double q_blend) const {
    return (q + q_blend) * member.d_mu + q_out * outlier.d_mu;
  }
  double d_off(double q, double q_out, double q_blend) const {
    return (q + q_blend) * member.d_off + q_out * outlier.d_off;
  }
  // d ln L_i / d F for the outlier's variance F^2 var, with its posterior weight.
  double d_factor(double q_out, double factor, double var) const {
    return q_out * outlier.d_var * 2.0 * factor * var;
  }
};

// The clusters' own parallaxes, sum_g w_g ln N(pi_g | 10^(-0.2 (mu_g - 10)) + offset, var_g)
// over the groups with var_g > 0 (mu: the groups' moduli in order): adds d/dmu_g to d_mu[g]
// and d/doffset to d_off.
double group_parallax_log_l(const std::vector<FitData::GroupParallax>& groups, const double* mu,
                            double offset, double* d_mu, double& d_off);

}  // namespace rungcal::hier
