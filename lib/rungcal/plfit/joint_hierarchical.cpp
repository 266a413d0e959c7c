// SPDX-License-Identifier: MIT
#include "rungcal/plfit/joint_hierarchical.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <optional>

#include <Eigen/Dense>

#include "rungcal/plfit/distance_integral.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/plfit/likelihood_solver.hpp"
#include "rungcal/plfit/priors.hpp"

namespace rungcal {
namespace {

using namespace hier;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kInf = std::numeric_limits<double>::infinity();

// A star has at most a handful of relations: fixed-capacity matrices, no allocation.
using SmallMatrix = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, 0, 8, 8>;
using SmallVector = Eigen::Matrix<double, Eigen::Dynamic, 1, 0, 8, 1>;

std::vector<Scale> scales_of(const JointLayout& L) {
  std::vector<Scale> s(static_cast<std::size_t>(L.size), Scale::kLinear);
  auto set = [&](int j, Scale scale) {
    if (j >= 0) s[static_cast<std::size_t>(j)] = scale;
  };
  for (int j : L.sigma) set(j, Scale::kLog);
  for (int j : L.blend_ratio) set(j, Scale::kLog);
  set(L.correlation, Scale::kAtanh);
  set(L.outlier, Scale::kLogit);
  set(L.blend, Scale::kLogit);
  for (int j :
       {L.outlier_width, L.blend_scale, L.distance_scale, L.distance_exponent, L.feh_spread})
    set(j, Scale::kLog);
  set(L.distance_power, Scale::kLogPlusOne);
  set(L.outlier_factor, Scale::kLogAboveThree);
  return s;
}

// One star's magnitudes reduced to what they say about its distance (see the header): the
// magnitude m_eff, its variance 1/a, the colour term c, and what the gradient needs.
struct Reduced {
  bool ok = false;
  double m_eff = 0, a = 0, colour = 0;
  SmallVector p, u;  // P 1, P (r - m_eff 1)
  SmallMatrix P;
};

Reduced reduce(const SmallVector& r, const SmallMatrix& S) {
  Reduced o;
  const auto K = r.size();
  Eigen::LLT<SmallMatrix> llt(S);
  if (llt.info() != Eigen::Success) return o;
  const SmallMatrix lower = llt.matrixL();
  double log_det = 0;
  for (Eigen::Index k = 0; k < K; ++k) {
    if (!(lower(k, k) > 0)) return o;
    log_det += 2.0 * std::log(lower(k, k));
  }
  o.P = llt.solve(SmallMatrix::Identity(K, K));
  o.p = o.P * SmallVector::Ones(K);
  o.a = o.p.sum();
  const SmallVector s = o.P * r;
  o.m_eff = s.sum() / o.a;
  o.u = s - o.m_eff * o.p;
  const double q = r.dot(s) - o.a * o.m_eff * o.m_eff;
  o.colour = -0.5 * (static_cast<double>(K - 1) * kLog2Pi + log_det + std::log(o.a) + q);
  o.ok = std::isfinite(o.colour) && o.a > 0;
  return o;
}

class JointEvaluator final : public StarSumObjective {
 private:
  // The blend ratio parameter of entry e's relation (-1: the first relation, ratio 1).
  int ratio_index(int e) const {
    return L_.blend_ratio[static_cast<std::size_t>(d_.relation[static_cast<std::size_t>(e)])];
  }

  // The coloured blend component's terms of d ln L / d r, d S and d kappa (the ratios),
  // weighted by the star's blend probability q: with h = P kappa - kappa_eff P 1,
  // d kappa_eff = -p^T dS h / a + p^T dkappa / a, dD = -h^T dS h + 2 h^T dkappa and
  // dt = h^T dr - h^T dS u + u^T dkappa (t = kappa^T u; matrix calculus as for m_eff).
  void add_blend_colour_gradient(const Reduced& red, const SmallVector& hk, const Component& blend,
                                 double b0, double q, int e0, SmallVector& gr, SmallMatrix& G,
                                 Eigen::VectorXd& g) const {
    // The component's derivatives in (kappa_eff, D, t) through the shift -kappa_eff b0, the
    // tilt t + b0 D and the constant -b0 t - b0^2 D / 2.
    const double d_kappa = blend.d_blend_kappa - b0 * blend.d_m;
    const double d_tilt = blend.d_blend_tilt - b0;
    const double d_curv = blend.d_blend_curvature + b0 * blend.d_blend_tilt - 0.5 * b0 * b0;
    gr += q * d_tilt * hk;
    G -= q * (0.5 * d_kappa / red.a * (red.p * hk.transpose() + hk * red.p.transpose()) +
              d_curv * hk * hk.transpose() +
              0.5 * d_tilt * (hk * red.u.transpose() + red.u * hk.transpose()));
    for (Eigen::Index k = 0; k < hk.size(); ++k) {
      const int j = ratio_index(e0 + static_cast<int>(k));
      if (j >= 0)
        g[j] += q * (d_kappa * red.p[k] / red.a + 2.0 * d_curv * hk[k] + d_tilt * red.u[k]);
    }
  }

 public:
  JointEvaluator(const JointData& d, const FitSettings& s, const JointLayout& L)
      : d_(d),
        s_(s),
        L_(L),
        scales_(scales_of(L)),
        k_(s.hierarchical.quadrature_nodes, static_cast<std::size_t>(d.stars())),
        priors_(prior_rows(s.params, AnchorBlock{L.anchor0, L.n_anchors - s.terms.n_clusters,
                                                 s.anchor_prior_correlation})) {
    mixture_ = component_on(s.params, L.outlier);
    blends_ = component_on(s.params, L.blend);
    for (int j : L.blend_ratio)
      if (j >= 0 && !(s.params[static_cast<std::size_t>(j)].mode == ParamMode::kFixed &&
                      s.params[static_cast<std::size_t>(j)].value == 1.0))
        coloured_ = blends_;
  }

  double evaluate(const Eigen::VectorXd& x, Eigen::VectorXd* grad) override {
    return evaluate(x, grad, nullptr);
  }

  double evaluate(const Eigen::VectorXd& x, Eigen::VectorXd* grad, Eigen::ArrayXd* membership) {
    const Eigen::VectorXd t = external_of(scales_, x);
    const HierarchicalSettings& h = s_.hierarchical;
    const int R = static_cast<int>(L_.alpha.size());
    auto at = [&](int j) { return j >= 0 ? t[j] : 0.0; };
    const double rho = at(L_.correlation), offset = t[L_.offset];
    const double f = mixture_ ? t[L_.outlier] : 0.0, log_f = std::log(f), log_1f = std::log1p(-f);
    const double fb = blends_ ? t[L_.blend] : 0.0, blend_scale = blends_ ? t[L_.blend_scale] : 1.0;
    const double log_fb = std::log(fb), log_1fb = std::log1p(-fb);
    const bool feh_errors = L_.feh_mean >= 0;
    const double mu_z = at(L_.feh_mean),
                 tau2 = feh_errors ? t[L_.feh_spread] * t[L_.feh_spread] : 0.0;
    double alpha_mean = 0;
    for (int r = 0; r < R; ++r) alpha_mean += t[L_.alpha[static_cast<std::size_t>(r)]] / R;
    DistancePriorShape prior;
    if (L_.distance_scale >= 0)
      prior = DistancePriorShape::make(t[L_.distance_scale], t[L_.distance_power],
                                       t[L_.distance_exponent]);
    const auto H = static_cast<std::size_t>(L_.distance_bins);
    if (L_.distance_bin0 >= 0)
      prior = DistancePriorShape::make_histogram(histogram_start_at(h, alpha_mean),
                                                 h.histogram_step, h.histogram_kernel,
                                                 t.data() + L_.distance_bin0, L_.distance_bins + 1);
    k_.clear_bins(H);
    const double width = L_.outlier_width >= 0 ? t[L_.outlier_width] : h.outlier_mag_width;
    const double wide = width * width,
                 shift = L_.outlier_shift >= 0 ? t[L_.outlier_shift] : h.outlier_mag_shift;
    const double plx_factor =
        L_.outlier_factor >= 0 ? t[L_.outlier_factor] : h.outlier_parallax_factor;
    const double plx_factor2 = plx_factor * plx_factor;
    const int plx_power = outlier_parallax_power(h.outlier_parallax);
    const ParallaxOutlierShape plx_shape = parallax_outlier_shape(plx_power > 0, wide, shift);
    const double log_w_member = (mixture_ ? log_1f : 0.0) + (blends_ ? log_1fb : 0.0);
    const double log_w_blend = (mixture_ ? log_1f : 0.0) + log_fb;

    Eigen::VectorXd g = Eigen::VectorXd::Zero(L_.size);  // d ln L / d external
    double log_l = 0;
    Shared sh;  // the shared components' sums
    // The gradient of the stars so far (reported parameters), when scores are collected.
    Eigen::VectorXd so_far = Eigen::VectorXd::Zero(L_.size);
    for (int i = 0; i < (stars_ ? d_.stars() : 0); ++i) {
      const int e0 = d_.first[static_cast<std::size_t>(i)],
                K = d_.first[static_cast<std::size_t>(i) + 1] - e0;
      const JointStarKind kind = d_.kind[static_cast<std::size_t>(i)];
      const auto si = static_cast<std::size_t>(i);
      // A bootstrap's star drawn n times counts n times (JointData::weight).
      const double count = d_.weight_of(i);
      // [Fe/H]: its latent true value marginalised (Kelly 2007), shared by the relations.
      double zbar = d_.feh[si], wz = 0, dz_mean = 0, dz_tau2 = 0, dwz_tau2 = 0;
      if (feh_errors) {
        const double s2 = d_.var_feh.empty() ? 0.0 : d_.var_feh[si], den = tau2 + s2,
                     dz = d_.feh[si] - mu_z;
        zbar = (tau2 * d_.feh[si] + s2 * mu_z) / den;
        wz = tau2 * s2 / den;
        dz_mean = s2 / den;
        dz_tau2 = s2 * dz / (den * den);
        dwz_tau2 = s2 * s2 / (den * den);
        log_l += -0.5 * count * (dz * dz / den + kLog2Pi + std::log(den));
        g[L_.feh_mean] += count * dz / den;
        sh.feh_var += 0.5 * count * (dz * dz - den) / (den * den);
      }
      SmallVector r(K), gam(K), sig(K);
      SmallMatrix S(K, K);
      for (int k = 0; k < K; ++k) {
        const auto e = static_cast<std::size_t>(e0 + k);
        const auto rel = static_cast<std::size_t>(d_.relation[e]);
        gam[k] = at(L_.gamma[rel]);
        sig[k] = t[L_.sigma[rel]];
        r[k] = d_.m0[e] - (t[L_.alpha[rel]] + t[L_.beta[rel]] * d_.x[e] + gam[k] * zbar);
      }
      for (int k = 0; k < K; ++k)
        for (int l = 0; l < K; ++l) {
          const auto ek = static_cast<std::size_t>(e0 + k), el = static_cast<std::size_t>(e0 + l);
          S(k, l) = d_.coefficient[ek] * d_.coefficient[el] * d_.var_ebv[si] +
                    gam[k] * gam[l] * wz +
                    (k == l ? d_.var_phot[ek] + sig[k] * sig[k] : rho * sig[k] * sig[l]);
        }
      const Reduced red = reduce(r, S);
      if (!red.ok) {  // S not positive definite (rho below -1/(K-1)): outside the model
        if (grad) *grad = Eigen::VectorXd::Constant(L_.size, kNaN);
        return kInf;
      }
      const double v_eff = 1.0 / red.a;
      // A coloured blend (the header): its brightening kappa_k (b0 + b) moves m_eff by
      // kappa_eff (b0 + b) and leaves the colour term c - (b0 + b) t - (b0 + b)^2 D / 2.
      const double b0 = h.blend_min_mag;
      BlendColour colour;
      SmallVector kap, hk;
      double tilt = 0;
      if (coloured_) {
        kap.resize(K);
        for (int k = 0; k < K; ++k) {
          const int j = ratio_index(e0 + k);
          kap[k] = j >= 0 ? t[j] : 1.0;
        }
        colour.kappa = red.p.dot(kap) / red.a;
        hk = red.P * kap - colour.kappa * red.p;
        colour.curvature = std::max(0.0, kap.dot(hk));
        tilt = kap.dot(red.u);
        colour.tilt = tilt + b0 * colour.curvature;
      }
      const double blend_shift = coloured_ ? -colour.kappa * b0 : -b0;
      const double blend_colour_log_l =
          coloured_ ? -b0 * tilt - 0.5 * b0 * b0 * colour.curvature : 0.0;
      Component member, outlier, blend;
      std::optional<OwnParallax> own;
      if (kind == JointStarKind::kParallax) {
        member = integrate_parallax(red.m_eff, GaussianMagnitude(v_eff), d_.plx[si], d_.var_plx[si],
                                    0.0, offset, prior, k_.member_rule, k_.mode_member[si],
                                    k_.bins_member.data());
        if (mixture_)
          outlier = integrate_parallax(red.m_eff, GaussianMagnitude(v_eff + plx_shape.wide),
                                       d_.plx[si], plx_factor2 * d_.var_plx[si], -plx_shape.shift,
                                       offset, prior, k_.member_rule, k_.mode_outlier[si],
                                       k_.bins_outlier.data(), plx_power);
        if (coloured_)
          blend = integrate_parallax(red.m_eff,
                                     ColouredBlendMagnitude(v_eff, blend_scale, h.blends, colour),
                                     d_.plx[si], d_.var_plx[si], blend_shift, offset, prior,
                                     k_.blend_rule, k_.mode_blend[si], k_.bins_blend.data());
        else if (blends_)
          blend = integrate_parallax(red.m_eff, BlendMagnitude(v_eff, blend_scale, h.blends),
                                     d_.plx[si], d_.var_plx[si], blend_shift, offset, prior,
                                     k_.blend_rule, k_.mode_blend[si], k_.bins_blend.data());
      } else {
        const double mu =
            kind == JointStarKind::kKnownDistance ? d_.mu[si] : t[L_.anchor0 + d_.group[si]];
        const double var = v_eff + (kind == JointStarKind::kKnownDistance ? d_.var_mu[si] : 0.0);
        member = given_modulus(red.m_eff, GaussianMagnitude(var), mu, 0.0);
        if (mixture_) outlier = given_modulus(red.m_eff, GaussianMagnitude(var + wide), mu, -shift);
        if (coloured_)
          blend =
              given_modulus(red.m_eff, ColouredBlendMagnitude(var, blend_scale, h.blends, colour),
                            mu, blend_shift);
        else if (blends_)
          blend =
              given_modulus(red.m_eff, BlendMagnitude(var, blend_scale, h.blends), mu, blend_shift);
        if (kind == JointStarKind::kGroup && d_.var_plx[si] > 0) {
          own.emplace(d_.plx[si], d_.var_plx[si], plx_factor2, mu, offset, plx_power);
          own->add_to(member, outlier, blend);
        }
      }
      blend.log_l += blend_colour_log_l;
      double li = member.log_l, q = 1.0, q_out = 0.0, q_blend = 0.0;
      if (mixture_ || blends_) {
        const double a = log_w_member + member.log_l;
        const double b = mixture_ ? log_f + outlier.log_l : -kInf;
        const double c = blends_ ? log_w_blend + blend.log_l : -kInf;
        const double top = std::max({a, b, c});
        li = top + std::log(std::exp(a - top) + std::exp(b - top) + std::exp(c - top));
        q = std::exp(a - li), q_out = std::exp(b - li), q_blend = std::exp(c - li);
      }
      if (membership) (*membership)[i] = q;
      log_l += count * (li + red.colour);
      q *= count, q_out *= count, q_blend *= count;  // every gradient term below is per draw
      if (mixture_) {
        sh.outlier += q_out / f - (q + q_blend) / (1.0 - f);
        if (kind != JointStarKind::kParallax || plx_shape.fitted)
          sh.shift -= q_out * outlier.d_m, sh.wide += q_out * outlier.d_v;
        // Its parallax variance is F^2 sigma_pi^2.
        if (kind == JointStarKind::kParallax)
          sh.factor += q_out * outlier.d_var_plx * 2.0 * plx_factor * d_.var_plx[si];
        else if (own)
          sh.factor += own->d_factor(q_out, plx_factor, d_.var_plx[si]);
      }
      if (blends_) {
        sh.blend += q_blend / fb - q / (1.0 - fb);
        sh.blend_scale += q_blend * blend.d_blend_scale;
      }
      auto mix = [&](double Component::*field) {
        return q * member.*field + q_out * outlier.*field + q_blend * blend.*field;
      };
      // d ln L / d m_eff and / d (1/a), then / d r and / d S (the header's factorisation).
      const double d_meff = -mix(&Component::d_m), d_veff = mix(&Component::d_v);
      SmallVector gr = d_meff / red.a * red.p - count * red.u;
      SmallMatrix G =
          -d_meff / (2.0 * red.a) * (red.p * red.u.transpose() + red.u * red.p.transpose()) +
          (d_veff / (red.a * red.a) + 0.5 * count / red.a) * red.p * red.p.transpose() +
          0.5 * count * (red.u * red.u.transpose() - red.P);
      if (coloured_) add_blend_colour_gradient(red, hk, blend, b0, q_blend, e0, gr, G, g);
      const SmallVector Gg = G * gam;
      for (int k = 0; k < K; ++k) {
        const auto e = static_cast<std::size_t>(e0 + k);
        const auto rel = static_cast<std::size_t>(d_.relation[e]);
        g[L_.alpha[rel]] -= gr[k];
        g[L_.beta[rel]] -= gr[k] * d_.x[e];
        if (L_.gamma[rel] >= 0) g[L_.gamma[rel]] += -gr[k] * zbar + 2.0 * Gg[k] * wz;
        double d_sigma = 2.0 * sig[k] * G(k, k);
        for (int l = 0; l < K; ++l)
          if (l != k) d_sigma += 2.0 * G(k, l) * rho * sig[l];
        g[L_.sigma[rel]] += d_sigma;
        if (L_.correlation >= 0)
          for (int l = 0; l < K; ++l)
            if (l != k) g[L_.correlation] += G(k, l) * sig[k] * sig[l];
      }
      if (feh_errors) {
        const double d_zbar = -gr.dot(gam), d_w = gam.dot(Gg);
        g[L_.feh_mean] += d_zbar * dz_mean;
        sh.feh_var += d_zbar * dz_tau2 + d_w * dwz_tau2;
      }
      if (kind == JointStarKind::kParallax) {
        g[L_.offset] += mix(&Component::d_off);
        if (L_.distance_scale >= 0) {
          g[L_.distance_scale] += mix(&Component::d_log_scale) / t[L_.distance_scale];
          g[L_.distance_power] += mix(&Component::d_power);
          g[L_.distance_exponent] += mix(&Component::d_exponent);
        }
        if (L_.distance_bin0 >= 0) {
          const double d_grid = mix(&Component::d_prior_mu) / R;
          for (int rel = 0; rel < R; ++rel) g[L_.alpha[static_cast<std::size_t>(rel)]] += d_grid;
        }
        for (std::size_t j = 0; j < H; ++j)
          g[L_.distance_bin0 + static_cast<int>(j)] +=
              q * k_.bins_member[j] + (mixture_ ? q_out * k_.bins_outlier[j] : 0.0) +
              (blends_ ? q_blend * k_.bins_blend[j] : 0.0);
      }
      if (kind == JointStarKind::kGroup) {
        g[L_.anchor0 + d_.group[si]] += mix(&Component::d_m);  // d/dmu_g = d/dM
        if (own)
          g[L_.anchor0 + d_.group[si]] += own->d_mu(q, q_out, q_blend),
              g[L_.offset] += own->d_off(q, q_out, q_blend);
      }
      if (scores_) {
        Eigen::VectorXd now = finished(g, sh, t, width), row;
        internal_gradient(scales_, t, now - so_far, row);
        scores_->row(i) = row;
        so_far = std::move(now);
      }
    }
    if (!d_.group_plx.empty())
      log_l += group_parallax_log_l(d_.group_plx, t.data() + L_.anchor0, offset,
                                    g.data() + L_.anchor0, g[L_.offset]);
    double value = -log_l;
    g = -finished(g, sh, t, width);
    value += hyperprior_terms(t, L_.distance_bin0, L_.distance_bins, h.histogram_walk_sigma,
                              priors_, s_.params, g);
    if (grad) internal_gradient(scales_, t, g, *grad);
    return value;
  }

  // A star with all its relations is one row.
  void collect_scores(Eigen::MatrixXd* scores) override { scores_ = scores; }
  // What is left: the priors, the histogram's hyperprior and the groups' parallaxes.
  void drop_stars() override { stars_ = false; }

 private:
  // The sums over stars of the parameters every relation shares (d ln L / d each).
  struct Shared {
    double outlier = 0, shift = 0, wide = 0, factor = 0, blend = 0, blend_scale = 0, feh_var = 0;
  };
  // d ln L / d (reported parameters): g with the shared sums in their slots. Linear in both,
  // so the difference of two is the gradient of the stars between them, and zero sums give
  // zero.
  Eigen::VectorXd finished(Eigen::VectorXd g, const Shared& sh, const Eigen::VectorXd& t,
                           double width) const {
    if (L_.outlier >= 0) g[L_.outlier] = sh.outlier;
    if (L_.outlier_shift >= 0) g[L_.outlier_shift] = sh.shift;
    if (L_.outlier_width >= 0) g[L_.outlier_width] = sh.wide * 2.0 * width;
    if (L_.outlier_factor >= 0) g[L_.outlier_factor] = sh.factor;
    if (L_.blend >= 0) g[L_.blend] = sh.blend, g[L_.blend_scale] = sh.blend_scale;
    if (L_.feh_mean >= 0) g[L_.feh_spread] = sh.feh_var * 2.0 * t[L_.feh_spread];
    return g;
  }

  const JointData& d_;
  const FitSettings& s_;
  const JointLayout& L_;
  std::vector<Scale> scales_;
  StarIntegrals k_;
  std::vector<PriorRow> priors_;
  bool mixture_ = true, blends_ = false;
  bool coloured_ = false;              // blends brighten the relations by different amounts
  Eigen::MatrixXd* scores_ = nullptr;  // collect_scores
  bool stars_ = true;                  // drop_stars
};

}  // namespace

JointLayout JointLayout::make_hierarchical(const std::vector<std::string>& names,
                                           const std::vector<bool>& metallicity, bool shared_slope,
                                           const std::vector<std::string>& anchors,
                                           const ParameterLayout& shared, bool feh_errors) {
  JointLayout L;
  int next = 0, slope = -1;
  auto add = [&](const std::string& name) {
    L.names.push_back(name);
    return next++;
  };
  for (std::size_t r = 0; r < names.size(); ++r) {
    L.alpha.push_back(add("alpha_" + names[r]));
    if (!shared_slope || slope < 0) slope = add(shared_slope ? "beta" : "beta_" + names[r]);
    L.beta.push_back(slope);
    L.gamma.push_back(metallicity[r] ? add("gamma_" + names[r]) : -1);
    L.sigma.push_back(add("sigma_int_" + names[r]));
  }
  L.correlation = add("scatter_correlation");
  L.offset = add("parallax_offset_mas");
  L.anchor0 = next;
  L.n_anchors = static_cast<int>(anchors.size());
  for (const auto& a : anchors) add("mu_" + a);
  auto copy = [&](int from) {
    return from >= 0 ? add(shared.names[static_cast<std::size_t>(from)]) : -1;
  };
  L.outlier = copy(shared.outlier);
  L.outlier_shift = copy(shared.outlier_shift);
  L.outlier_width = copy(shared.outlier_width);
  L.outlier_factor = copy(shared.outlier_factor);
  L.blend = copy(shared.blend);
  L.blend_scale = copy(shared.blend_scale);
  L.blend_ratio.assign(names.size(), -1);
  if (L.blend >= 0)
    for (std::size_t r = 1; r < names.size(); ++r)
      L.blend_ratio[r] = add("blend_ratio_" + names[r]);
  L.distance_scale = copy(shared.distance_scale);
  L.distance_power = copy(shared.distance_power);
  L.distance_exponent = copy(shared.distance_exponent);
  if (shared.distance_bin0 >= 0) {
    L.distance_bin0 = next;
    L.distance_bins = shared.distance_bins;
    for (int j = 0; j < shared.distance_bins; ++j) copy(shared.distance_bin0 + j);
  }
  if (feh_errors) {
    L.feh_mean = add("feh_mean");
    L.feh_spread = add("feh_spread");
  }
  L.size = next;
  return L;
}

JointHierarchicalValue joint_hierarchical_value(const JointData& data, const FitSettings& settings,
                                                const JointLayout& layout,
                                                const Eigen::VectorXd& theta) {
  JointEvaluator e(data, settings, layout);
  JointHierarchicalValue v;
  v.neg_log_likelihood = e.evaluate(internal_of(scales_of(layout), theta), &v.gradient);
  v.finite = std::isfinite(v.neg_log_likelihood) && v.gradient.allFinite();
  return v;
}

FitSolution solve_joint_hierarchical(const JointData& data, const FitSettings& settings,
                                     const JointLayout& layout, const Eigen::VectorXd& start) {
  JointEvaluator e(data, settings, layout);
  return minimise(e, scales_of(layout), settings, start);
}

bool joint_hierarchical_covariance(const JointData& data, const FitSettings& settings,
                                   const JointLayout& layout, const Eigen::VectorXd& theta,
                                   Eigen::MatrixXd& covariance,
                                   std::vector<std::string>& undetermined,
                                   std::shared_ptr<const Eigen::MatrixXd>* preconditioner,
                                   Eigen::MatrixXd* sandwich) {
  covariance = Eigen::MatrixXd::Zero(layout.size, layout.size);
  const std::vector<int> all_free = free_parameters(settings.params);
  const bool no_outliers = layout.outlier >= 0 && theta[layout.outlier] < 1e-3;
  const bool no_blends = layout.blend >= 0 && theta[layout.blend] < 1e-3;
  std::vector<int> measured;
  for (int j : all_free) {
    const bool scatter_gone =
        std::find(layout.sigma.begin(), layout.sigma.end(), j) != layout.sigma.end() &&
        theta[j] < 1e-3;
    // F at its floor of 3 (kLogAboveThree) has no interior maximum either.
    const bool edge = scatter_gone ||
                      (j == layout.outlier_factor && outlier_factor_at_floor(theta[j])) ||
                      (no_outliers && (j == layout.outlier || j == layout.outlier_shift ||
                                       j == layout.outlier_width || j == layout.outlier_factor)) ||
                      (no_blends && (j == layout.blend || j == layout.blend_scale ||
                                     std::find(layout.blend_ratio.begin(), layout.blend_ratio.end(),
                                               j) != layout.blend_ratio.end()));
    if (edge) {
      undetermined.push_back(layout.names[static_cast<std::size_t>(j)]);
      covariance(j, j) = kNaN;
    } else {
      measured.push_back(j);
    }
  }
  JointEvaluator e(data, settings, layout), rest(data, settings, layout);
  return hessian_and_sandwich(e, rest, data.stars(), scales_of(layout), measured, all_free, theta,
                              covariance, preconditioner, sandwich);
}

Eigen::VectorXd joint_hierarchical_restricted(const JointData& data, const FitSettings& settings,
                                              const JointLayout& layout,
                                              const Eigen::VectorXd& theta,
                                              const Eigen::MatrixXd& covariance) {
  std::vector<int> location;
  for (const std::vector<int>* per : {&layout.alpha, &layout.beta, &layout.gamma})
    for (int j : *per)
      if (j >= 0) location.push_back(j);
  if (layout.offset >= 0) location.push_back(layout.offset);
  for (int g = 0; g < layout.n_anchors; ++g) location.push_back(layout.anchor0 + g);
  std::vector<int> scatter = layout.sigma;
  if (layout.correlation >= 0) scatter.push_back(layout.correlation);
  JointEvaluator e(data, settings, layout);
  return restricted_step(e, scales_of(layout), location, scatter, theta, covariance);
}

Eigen::ArrayXd joint_hierarchical_membership(const JointData& data, const FitSettings& settings,
                                             const JointLayout& layout,
                                             const Eigen::VectorXd& theta) {
  JointEvaluator e(data, settings, layout);
  Eigen::ArrayXd q = Eigen::ArrayXd::Ones(data.stars());
  e.evaluate(internal_of(scales_of(layout), theta), nullptr, &q);
  return q;
}

}  // namespace rungcal
