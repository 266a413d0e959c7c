// SPDX-License-Identifier: MIT
#include "rungcal/plfit/hierarchical.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <optional>

#include <Eigen/Dense>

#include "rungcal/plfit/distance_integral.hpp"
#include "rungcal/plfit/likelihood_solver.hpp"
#include "rungcal/plfit/priors.hpp"

namespace rungcal {
namespace {

using namespace hier;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

Scale scale_of(const ParameterLayout& L, int j) {
  if (j == L.sigma || j == L.distance_scale || j == L.distance_exponent || j == L.feh_spread ||
      j == L.outlier_width || j == L.blend_scale)
    return Scale::kLog;
  if (j == L.distance_power) return Scale::kLogPlusOne;
  if (j == L.outlier_factor) return Scale::kLogAboveThree;
  if (j == L.outlier || j == L.blend) return Scale::kLogit;
  return Scale::kLinear;
}

// The solver never reaches an edge of a domain; a value on it (a scatter fixed or started at

std::vector<Scale> scales_of(const ParameterLayout& L) {
  std::vector<Scale> s;
  for (int j = 0; j < L.size; ++j) s.push_back(scale_of(L, j));
  return s;
}

// Gradient accumulators in the natural parameters.
struct Gradient {
  double alpha = 0, beta = 0, beta_long = 0, gamma = 0, offset = 0, var_int = 0, outlier = 0;
  double log_scale = 0, power = 0, exponent = 0, feh_mean = 0, feh_var = 0, outlier_shift = 0,
         outlier_wide = 0, outlier_factor = 0;
  double blend = 0, blend_scale = 0;
  std::vector<double> anchor, bins;
};

class Evaluator final : public StarSumObjective {
 public:
  Evaluator(const FitData& d, const FitSettings& s, const ParameterLayout& L)
      : d_(d),
        s_(s),
        L_(L),
        scales_(scales_of(L)),
        k_(s.hierarchical.quadrature_nodes, static_cast<std::size_t>(d.parallax.size())),
        priors_(prior_rows(s, L)) {
    mixture_ = component_on(s.params, L.outlier);
    blends_ = component_on(s.params, L.blend);
  }

  // -ln L with priors, and its gradient in internal coordinates (full length).
  double evaluate(const Eigen::VectorXd& x, Eigen::VectorXd* grad) override {
    return evaluate(x, grad, nullptr);
  }
  double evaluate(const Eigen::VectorXd& x, Eigen::VectorXd* grad, Eigen::ArrayXd* membership) {
    const Eigen::VectorXd t = external_of(scales_, x);
    const HierarchicalSettings& h = s_.hierarchical;
    const double alpha = t[L_.alpha], beta = t[L_.beta],
                 beta_long = L_.beta_long >= 0 ? t[L_.beta_long] : 0.0;
    const double gamma = L_.gamma >= 0 ? t[L_.gamma] : 0.0, offset = t[L_.offset];
    const double sigma = t[L_.sigma], var_int = sigma * sigma;
    const double f = mixture_ ? t[L_.outlier] : 0.0;
    const double log_f = std::log(f), log_1f = std::log1p(-f);
    const double fb = blends_ ? t[L_.blend] : 0.0, blend_scale = blends_ ? t[L_.blend_scale] : 1.0;
    const double blend_min = h.blend_min_mag;
    const double log_fb = std::log(fb), log_1fb = std::log1p(-fb);
    const bool feh_errors = L_.feh_mean >= 0;
    const double mu_z = feh_errors ? t[L_.feh_mean] : 0.0,
                 tau2 = feh_errors ? t[L_.feh_spread] * t[L_.feh_spread] : 0.0;
    DistancePriorShape prior;
    if (L_.distance_scale >= 0 && d_.parallax.size() > 0)
      prior = DistancePriorShape::make(t[L_.distance_scale], t[L_.distance_power],
                                       t[L_.distance_exponent]);
    const auto H = static_cast<std::size_t>(L_.distance_bins);
    if (L_.distance_bin0 >= 0)
      prior = DistancePriorShape::make_histogram(histogram_start_at(h, alpha), h.histogram_step,
                                                 h.histogram_kernel, t.data() + L_.distance_bin0,
                                                 L_.distance_bins + 1);
    k_.clear_bins(H);
    const double width = L_.outlier_width >= 0 ? t[L_.outlier_width] : h.outlier_mag_width;
    const double wide = width * width,
                 shift = L_.outlier_shift >= 0 ? t[L_.outlier_shift] : h.outlier_mag_shift;
    const double plx_factor =
        L_.outlier_factor >= 0 ? t[L_.outlier_factor] : h.outlier_parallax_factor;
    const double plx_factor2 = plx_factor * plx_factor;
    const int plx_power = outlier_parallax_power(h.outlier_parallax);
    const ParallaxOutlierShape plx_shape = parallax_outlier_shape(plx_power > 0, wide, shift);

    const int n_anchors =
        (L_.outlier >= 0 ? L_.outlier : L_.size) - L_.anchor0;  // the layout's, not the settings'
    // The components' weights: (1 - f)(1 - f_b), f and (1 - f) f_b.
    const double log_w_member = (mixture_ ? log_1f : 0.0) + (blends_ ? log_1fb : 0.0);
    const double log_w_blend = (mixture_ ? log_1f : 0.0) + log_fb;
    Gradient g;
    g.anchor.assign(static_cast<std::size_t>(n_anchors), 0.0);
    g.bins.assign(H, 0.0);
    double log_l = 0;
    Eigen::Index out_row = 0;
    // The gradient of the stars so far (reported parameters), when scores are collected.
    Eigen::VectorXd so_far = Eigen::VectorXd::Zero(L_.size);
    for (int kind = 0; kind < (stars_ ? 3 : 0); ++kind) {
      const FitData::Common& c = kind == 0 ? d_.parallax : (kind == 1 ? d_.known : d_.anchor);
      for (Eigen::Index i = 0; i < c.size(); ++i, ++out_row) {
        const double w = c.weight.size() ? c.weight[i] : 1.0;
        // [Fe/H]: its latent true value marginalised (Kelly 2007).
        double zbar = c.feh[i], wz = 0, dz_mean = 0, dz_tau2 = 0, dwz_tau2 = 0;
        if (feh_errors) {
          const double s2 = c.var_feh.size() ? c.var_feh[i] : 0.0, den = tau2 + s2,
                       dz = c.feh[i] - mu_z;
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
        std::optional<OwnParallax> own;
        if (kind == 0) {
          const std::size_t k = static_cast<std::size_t>(i);
          member =
              integrate_parallax(c.m0[i], GaussianMagnitude(V), d_.plx[i], d_.var_plx[i], M, offset,
                                 prior, k_.member_rule, k_.mode_member[k], k_.bins_member.data());
          if (mixture_)
            outlier = integrate_parallax(c.m0[i], GaussianMagnitude(V + plx_shape.wide), d_.plx[i],
                                         plx_factor2 * d_.var_plx[i], M - plx_shape.shift, offset,
                                         prior, k_.member_rule, k_.mode_outlier[k],
                                         k_.bins_outlier.data(), plx_power);
          if (blends_)
            blend = integrate_parallax(c.m0[i], BlendMagnitude(V, blend_scale, h.blends), d_.plx[i],
                                       d_.var_plx[i], M - blend_min, offset, prior, k_.blend_rule,
                                       k_.mode_blend[k], k_.bins_blend.data());
        } else {
          const double mu = kind == 1 ? d_.mu[i] : t[L_.anchor0 + d_.group[i]];
          const double var_mu = kind == 1 ? d_.var_mu[i] : 0.0;
          member = given_modulus(c.m0[i], GaussianMagnitude(V + var_mu), mu, M);
          if (mixture_)
            outlier = given_modulus(c.m0[i], GaussianMagnitude(V + var_mu + wide), mu, M - shift);
          if (blends_)
            blend = given_modulus(c.m0[i], BlendMagnitude(V + var_mu, blend_scale, h.blends), mu,
                                  M - blend_min);
          if (kind == 2 && d_.anchor_var_plx.size() && d_.anchor_var_plx[i] > 0) {
            own.emplace(d_.anchor_plx[i], d_.anchor_var_plx[i], plx_factor2, mu, offset, plx_power);
            own->add_to(member, outlier, blend);
          }
        }
        // The mixture: q, q_out and q_blend are each component's posterior probability.
        double li = member.log_l, q = 1.0, q_out = 0.0, q_blend = 0.0;
        if (mixture_ || blends_) {
          const double a = log_w_member + member.log_l;
          const double b =
              mixture_ ? log_f + outlier.log_l : -std::numeric_limits<double>::infinity();
          const double e =
              blends_ ? log_w_blend + blend.log_l : -std::numeric_limits<double>::infinity();
          const double top = std::max({a, b, e});
          li = top + std::log(std::exp(a - top) + std::exp(b - top) + std::exp(e - top));
          q = std::exp(a - li), q_out = std::exp(b - li), q_blend = std::exp(e - li);
        }
        if (mixture_) {
          g.outlier += w * (q_out / f - (q + q_blend) / (1.0 - f));
          // The outlier magnitude is mu + M - shift with variance V + width^2 (a parallax
          // star's only if its shape is fitted).
          if (kind != 0 || plx_shape.fitted) {
            g.outlier_shift -= w * q_out * outlier.d_m;
            g.outlier_wide += w * q_out * outlier.d_v;
          }
          // Its parallax variance is F^2 sigma_pi^2.
          if (kind == 0)
            g.outlier_factor += w * q_out * outlier.d_var_plx * 2.0 * plx_factor * d_.var_plx[i];
          else if (own)
            g.outlier_factor += w * own->d_factor(q_out, plx_factor, d_.anchor_var_plx[i]);
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
            g.bins[j] +=
                w * (q * k_.bins_member[j] + (mixture_ ? q_out * k_.bins_outlier[j] : 0.0) +
                     (blends_ ? q_blend * k_.bins_blend[j] : 0.0));
        }
        if (kind == 2) {
          double& d_mu = g.anchor[static_cast<std::size_t>(d_.group[i])];
          d_mu += w * dm;  // d/dmu_g = d/dM
          if (own)
            d_mu += w * own->d_mu(q, q_out, q_blend), g.offset += w * own->d_off(q, q_out, q_blend);
        }
        if (scores_) {
          Eigen::VectorXd now = natural_gradient(g, t, width);
          scores_->row(out_row) = internal_score(t, now - so_far);
          so_far = std::move(now);
        }
      }
    }
    if (!d_.group_plx.empty())
      log_l += group_parallax_log_l(d_.group_plx, t.data() + L_.anchor0, offset, g.anchor.data(),
                                    g.offset);
    double value = -log_l;
    Eigen::VectorXd gext = -natural_gradient(g, t, width);
    value += hyperprior_terms(t, L_.distance_bin0, L_.distance_bins, h.histogram_walk_sigma,
                              priors_, s_.params, gext);
    if (grad) internal_gradient(scales_, t, gext, *grad);
    return value;
  }

  // Stars in parallax, known, anchor order.
  void collect_scores(Eigen::MatrixXd* scores) override { scores_ = scores; }
  // What is left: the priors, the histogram's hyperprior and the groups' parallaxes.
  void drop_stars() override { stars_ = false; }

 private:
  // d ln L / d (reported parameters) from the accumulators; linear in g, so the difference
  // of two is the gradient of the stars between them, and zero accumulators give zero.
  Eigen::VectorXd natural_gradient(const Gradient& g, const Eigen::VectorXd& t,
                                   double width) const {
    const double sigma = t[L_.sigma];
    const bool feh_errors = L_.feh_mean >= 0;
    Eigen::VectorXd gext = Eigen::VectorXd::Zero(L_.size);
    gext[L_.alpha] = g.alpha, gext[L_.beta] = g.beta, gext[L_.offset] = g.offset;
    if (L_.beta_long >= 0) gext[L_.beta_long] = g.beta_long;
    if (L_.gamma >= 0) gext[L_.gamma] = g.gamma;
    gext[L_.sigma] = g.var_int * 2.0 * sigma;  // d/dsigma
    for (std::size_t a = 0; a < g.anchor.size(); ++a)
      gext[L_.anchor0 + static_cast<int>(a)] = g.anchor[a];
    if (L_.outlier >= 0) gext[L_.outlier] = g.outlier;
    if (L_.outlier_shift >= 0) gext[L_.outlier_shift] = g.outlier_shift;
    if (L_.outlier_width >= 0) gext[L_.outlier_width] = g.outlier_wide * 2.0 * width;
    if (L_.outlier_factor >= 0) gext[L_.outlier_factor] = g.outlier_factor;
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
    for (std::size_t j = 0; j < g.bins.size(); ++j)
      gext[L_.distance_bin0 + static_cast<int>(j)] = g.bins[j];
    return gext;
  }
  Eigen::VectorXd internal_score(const Eigen::VectorXd& t, const Eigen::VectorXd& g) const {
    Eigen::VectorXd out;
    internal_gradient(scales_, t, g, out);
    return out;
  }

  const FitData& d_;
  const FitSettings& s_;
  const ParameterLayout& L_;
  std::vector<Scale> scales_;
  StarIntegrals k_;
  std::vector<PriorRow> priors_;
  bool mixture_ = true, blends_ = false;  // outlier and blend components present
  Eigen::MatrixXd* scores_ = nullptr;     // collect_scores
  bool stars_ = true;                     // drop_stars
};

// The free parameters as the solver's vector: x_free = base + P y with P the preconditioner

}  // namespace

HierarchicalValue hierarchical_value(const FitData& data, const FitSettings& settings,
                                     const ParameterLayout& layout, const Eigen::VectorXd& theta) {
  Evaluator e(data, settings, layout);
  HierarchicalValue v;
  v.neg_log_likelihood = e.evaluate(internal_of(scales_of(layout), theta), &v.gradient);
  v.finite = std::isfinite(v.neg_log_likelihood) && v.gradient.allFinite();
  return v;
}

FitSolution solve_hierarchical(const FitData& data, const FitSettings& settings,
                               const ParameterLayout& layout, const Eigen::VectorXd& start) {
  Evaluator e(data, settings, layout);
  return minimise(e, scales_of(layout), settings, start);
}

bool hierarchical_covariance(const FitData& data, const FitSettings& settings,
                             const ParameterLayout& layout, const Eigen::VectorXd& theta,
                             Eigen::MatrixXd& covariance, std::vector<std::string>& undetermined,
                             std::shared_ptr<const Eigen::MatrixXd>* preconditioner,
                             Eigen::MatrixXd* sandwich) {
  covariance = Eigen::MatrixXd::Zero(layout.size, layout.size);
  const std::vector<int> all_free = free_parameters(settings.params);
  std::vector<int> measured;
  for (int j : all_free) {
    // On the edge of the domain: the likelihood's maximum is not an interior point there.
    // Without outliers their component's shape has nothing to fit either.
    const bool no_outliers = layout.outlier >= 0 && theta[layout.outlier] < 1e-3;
    const bool no_blends = layout.blend >= 0 && theta[layout.blend] < 1e-3;
    // F at its floor of 3 (kLogAboveThree) has no interior maximum either.
    const bool edge = (j == layout.sigma && theta[j] < 1e-3) ||
                      (j == layout.outlier_factor && outlier_factor_at_floor(theta[j])) ||
                      (no_outliers && (j == layout.outlier || j == layout.outlier_shift ||
                                       j == layout.outlier_width || j == layout.outlier_factor)) ||
                      (no_blends && (j == layout.blend || j == layout.blend_scale));
    if (edge) {
      undetermined.push_back(layout.names[static_cast<std::size_t>(j)]);
      covariance(j, j) = kNaN;
    } else {
      measured.push_back(j);
    }
  }
  Evaluator e(data, settings, layout), rest(data, settings, layout);
  return hessian_and_sandwich(e, rest, data.stars(), scales_of(layout), measured, all_free, theta,
                              covariance, preconditioner, sandwich);
}

Eigen::VectorXd hierarchical_restricted(const FitData& data, const FitSettings& settings,
                                        const ParameterLayout& layout, const Eigen::VectorXd& theta,
                                        const Eigen::MatrixXd& covariance) {
  std::vector<int> location;
  for (int j : {layout.alpha, layout.beta, layout.beta_long, layout.gamma, layout.offset})
    if (j >= 0) location.push_back(j);
  if (layout.anchor0 >= 0)
    for (int g = 0; g < settings.terms.n_anchors; ++g) location.push_back(layout.anchor0 + g);
  Evaluator e(data, settings, layout);
  return restricted_step(e, scales_of(layout), location, {layout.sigma}, theta, covariance);
}

Eigen::ArrayXd hierarchical_membership(const FitData& data, const FitSettings& settings,
                                       const ParameterLayout& layout,
                                       const Eigen::VectorXd& theta) {
  Evaluator e(data, settings, layout);
  Eigen::ArrayXd q = Eigen::ArrayXd::Ones(data.stars());
  e.evaluate(internal_of(scales_of(layout), theta), nullptr, &q);
  return q;
}

}  // namespace rungcal