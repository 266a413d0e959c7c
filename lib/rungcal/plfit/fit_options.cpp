// SPDX-License-Identifier: MIT
// The fit stage's options: reading them from the config and the rules they must obey.
#include <algorithm>
#include <cmath>
#include <limits>
#include <string>
#include <utility>

#include <fmt/format.h>

#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/file_names.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/plfit/priors.hpp"
#include "rungcal/table/catalog_schema.hpp"

namespace rungcal {
namespace {

ParamSpec param_from(const ConfigSection& parent, const std::string& key, ParamSpec fallback) {
  if (!parent.has(key)) return fallback;
  if (!parent.is_table(key)) {
    // A bare number fixes the parameter at that value.
    return ParamSpec{ParamMode::kFixed, *parent.get_number(key), 0.0, false};
  }
  auto s = parent.section(key);
  ParamSpec p = fallback;
  std::string mode = s->string_or("mode", std::string(kParamModeNames.name(fallback.mode)));
  auto m = kParamModeNames.parse(mode);
  if (!m) s->fail("mode", fmt::format("'{}' is not one of: {}", mode, kParamModeNames.choices()));
  p.mode = *m;
  if (auto v = s->get_number("value")) {
    p.value = *v;
    p.has_start = true;
  } else if (p.mode != ParamMode::kFree && !fallback.has_start) {
    s->fail("value", "required for a fixed parameter or a prior");
  }
  p.prior_sigma = s->number_or("sigma", 0.0);
  if (p.mode == ParamMode::kPrior && !(p.prior_sigma > 0))
    s->fail("sigma", "a prior needs sigma > 0");
  return p;
}

// A parameter's fixed value or prior must be finite and, where the parameter has a domain,
// inside it (lower < value, or lower <= value when closed; value < upper).
std::string check_domain(const std::string& key, const ParamSpec& p,
                         double lower = -std::numeric_limits<double>::infinity(),
                         bool closed = false,
                         double upper = std::numeric_limits<double>::infinity()) {
  if (p.mode == ParamMode::kPrior && !(p.prior_sigma > 0 && std::isfinite(p.prior_sigma)))
    return key + ": a prior needs a finite sigma > 0";
  if (!std::isfinite(p.value)) return key + ": the value must be finite";
  if (p.mode == ParamMode::kFree && !p.has_start) return "";
  const bool above = closed ? p.value >= lower : p.value > lower;
  if (!above || !(p.value < upper))
    return fmt::format("{}: {} is outside the parameter's domain ({} {}, below {})", key, p.value,
                       closed ? ">=" : ">", lower, upper);
  return "";
}

}  // namespace

std::string FitOptions::check() const {
  if (input_path.empty()) return "fit.input: required";
  if (output_path.empty()) return "fit.output: required";
  if (relations.empty()) return "relation: at least one [[relation]] is required";
  if (!(loss_scale > 0)) return "fit.loss_scale: must be positive";
  if (clip_sigma < 0) return "fit.clip_sigma: must be 0 (off) or positive";
  if (bootstrap < 0 || bootstrap > kMaxBootstrap)
    return fmt::format("fit.bootstrap: must be 0 to {} resamples", kMaxBootstrap);
  if (zero_point == ZeroPointRecipe::kLindegren2021 &&
      (zero_point_table_5p.empty() || zero_point_table_6p.empty()))
    return "fit.zero_point_table_5p: both Lindegren et al. 2021 tables are required for that "
           "recipe";
  if (inflation == InflationRecipe::kConstant && !(inflation_factor > 0))
    return "fit.inflation_factor: must be positive";
  const bool hier = space == FitSpace::kHierarchical;
  if (hier && loss != LossKind::kNone)
    return "fit.loss: the hierarchical likelihood takes outliers as a mixture component "
           "(outlier_fraction); a robust "
           "loss applies to space = \"parallax\", \"magnitude\" or \"abl\"";
  if (scatter.mode == ParamMode::kPrior && !hier)
    return "fit.scatter: free or fixed only, except in the hierarchical model";
  if (std::string e = check_domain("fit.scatter", scatter, 0.0, true); !e.empty()) return e;
  if (std::string e = check_domain("fit.offset", offset); !e.empty()) return e;
  if (std::string e = check_domain("fit.outlier_fraction", outlier_fraction, 0.0, true, 1.0);
      !e.empty())
    return e;
  if (std::string e = check_domain("fit.distance_scale_kpc", distance_scale, 0.0, false);
      !e.empty())
    return e;
  if (std::string e = check_domain("fit.distance_power", distance_power, -1.0, false); !e.empty())
    return e;
  if (std::string e = check_domain("fit.distance_exponent", distance_exponent, 0.0, false);
      !e.empty())
    return e;
  if (std::string e = check_domain("fit.feh_mean", feh_mean); !e.empty()) return e;
  if (std::string e = check_domain("fit.feh_spread", feh_spread, 0.0, false); !e.empty()) return e;
  if (!(hierarchical.histogram_step >= 0.1 && hierarchical.histogram_step <= 2.0))
    return "fit.histogram_step_mag: must be 0.1 to 2 mag";
  if (!(hierarchical.histogram_walk_sigma > 0.05 && hierarchical.histogram_walk_sigma <= 100))
    return "fit.histogram_smoothing: must be above 0.05 and at most 100";
  if (!(hierarchical.histogram_kernel >= kHistogramKernelFractionMin &&
        hierarchical.histogram_kernel <= 1.0))
    return "fit.histogram_kernel_fraction: must be 0.75 to 1 (of the step)";
  if (!(hierarchical.histogram_margin >= 0 && hierarchical.histogram_margin <= 5))
    return "fit.histogram_margin_mag: must be 0 to 5 mag";
  if (!(hierarchical.quadrature_nodes >= 8 && hierarchical.quadrature_nodes <= 128))
    return "fit.quadrature_nodes: must be 8 to 128";
  if (std::string e = check_domain("fit.outlier_mag_width", outlier_width, 0.0, false, 100.0);
      !e.empty())
    return e;
  if (std::string e = check_domain("fit.outlier_mag_shift", outlier_shift, -100.0, false, 100.0);
      !e.empty())
    return e;
  if (std::string e = check_domain("fit.blend_fraction", blend_fraction, 0.0, true, 1.0);
      !e.empty())
    return e;
  if (std::string e = check_domain("fit.blend_scale_mag", blend_scale, 0.0, false, 10.0);
      !e.empty())
    return e;
  if (!(hierarchical.blend_min_mag >= 0 && hierarchical.blend_min_mag <= 5))
    return "fit.blend_min_mag: must be 0 to 5 mag";
  // Its value is its start even when free by default (no start given): checked either way.
  ParamSpec factor_start = outlier_factor;
  factor_start.has_start = true;
  if (std::string e = check_domain("fit.outlier_parallax_factor", factor_start, 3.0, false, 1e6);
      !e.empty())
    return e;
  if (joint && relations.size() < 2) return "fit.joint: needs two or more [[relation]]";
  if (joint && space != FitSpace::kParallax && !hier)
    return "fit.joint: the joint fit works in parallax space";
  if (hier) {
    if (std::string e = check_domain("fit.joint_scatter_correlation", joint_scatter_correlation,
                                     -1.0, false, 1.0);
        !e.empty())
      return e;
    if (std::string e = check_domain("fit.joint_blend_ratio", joint_blend_ratio, 0.0, false, 20.0);
        !e.empty())
      return e;
  } else if (!(joint_scatter_correlation.value >= 0.0 && joint_scatter_correlation.value < 1.0)) {
    return "fit.joint_scatter_correlation: must be in [0, 1) (the GLS joint fit)";
  }
  if (joint_shared_slope) {
    if (!joint) return "fit.joint_shared_slope: needs joint = true";
    for (const auto& r : relations)
      if (r.pivot_log_period != relations[0].pivot_log_period)
        return "fit.joint_shared_slope: every relation needs the same pivot_log_period";
  }
  for (const auto& r : relations) {
    if (r.band.empty() && r.magnitude_column.empty()) return "relation.band: required";
    if (!std::isfinite(r.pivot_log_period) || std::abs(r.pivot_log_period) > 10)
      return "relation.pivot_log_period: must be finite, |log P0| <= 10";
    if (r.break_log_period && !(std::abs(*r.break_log_period) <= 10))
      return "relation.break_log_period: must be finite, |log Pb| <= 10";
    for (const auto& [key, spec] :
         {std::pair{"relation.alpha", &r.alpha}, std::pair{"relation.slope", &r.slope},
          std::pair{"relation.beta_long", &r.slope_long}, std::pair{"relation.gamma", &r.gamma}})
      if (std::string e = check_domain(key, *spec); !e.empty()) return e;
    if (!hier && r.alpha.mode != ParamMode::kFree)
      return "relation.alpha: fixed or prior only in the hierarchical model";
    if (!hier && (r.gamma.mode != ParamMode::kFree || r.slope_long.mode != ParamMode::kFree))
      return "relation.gamma: fixed or prior only in the hierarchical model";
    if (!(r.min_log_period < r.max_log_period))
      return "relation.log_period_range: minimum must be below maximum";
    for (const auto& m : r.modes)
      if (!kPulsationModeNames.parse(m)) return "relation.modes: unknown mode '" + m + "'";
    for (const auto& c : r.classes)
      if (!kPulsatorClassNames.parse(c)) return "relation.classes: unknown class '" + c + "'";
  }
  if (std::string why = check_clusters(); !why.empty()) return why;
  if (anchor_covariance.size()) {
    if (std::string why =
            check_anchor_covariance(anchor_covariance, static_cast<int>(anchors.size()));
        !why.empty())
      return why;
    for (std::size_t g = 0; g < anchors.size(); ++g) {
      const double diag = anchor_prior_sigma(g);
      if (anchors[g].mu_err > 0 && std::abs(anchors[g].mu_err - diag) > 0.01 * diag)
        return fmt::format(
            "anchor.mu_err: {} differs from the square root of anchor_covariance's diagonal, "
            "{:.6g} ({})",
            anchors[g].mu_err, diag, anchors[g].group);
    }
    return "";
  }
  for (const auto& a : anchors)
    if (!(a.mu_err > 0)) return "anchor.mu_err: must be positive (" + a.group + ")";
  return "";
}

std::string FitOptions::check_clusters() const {
  if (!(cluster_member_max_sigma >= 0 && std::isfinite(cluster_member_max_sigma)))
    return "fit.cluster_member_max_sigma: must be 0 (no cut) or positive";
  std::vector<std::string> names = group_names();
  for (std::size_t i = 0; i < names.size(); ++i) {
    if (names[i].empty())
      return "cluster.group: required (the catalog's group value of its members)";
    if (std::count(names.begin(), names.end(), names[i]) > 1)
      return fmt::format(
          "cluster.group: '{}' names two groups (each [[anchor]] and [[cluster]] needs its own)",
          names[i]);
  }
  for (const ClusterOptions& k : clusters) {
    if (!k.has_parallax() && !k.has_modulus())
      return fmt::format(
          "cluster.parallax_mas: cluster {} needs a parallax (parallax_mas, parallax_err_mas) or a "
          "distance modulus (mu, mu_err)",
          k.group);
    if (k.has_parallax() && !(k.parallax_err_mas > 0 && std::isfinite(k.parallax_err_mas)))
      return fmt::format("cluster.parallax_err_mas: must be positive (cluster {})", k.group);
    if (k.has_parallax() && !(std::abs(k.parallax_mas) < 1000))
      return fmt::format("cluster.parallax_mas: {} mas is not a cluster's parallax (cluster {})",
                         k.parallax_mas, k.group);
    if (k.has_modulus() && !(k.mu_err > 0 && std::isfinite(k.mu_err)))
      return fmt::format("cluster.mu_err: must be positive (cluster {})", k.group);
    if (k.has_modulus() && !(k.mu > -5 && k.mu < 40))
      return fmt::format("cluster.mu: {} mag is not a distance modulus (cluster {})", k.mu,
                         k.group);
    if (k.has_parallax() && !k.has_modulus() && space != FitSpace::kHierarchical &&
        !(k.parallax_mas > 10 * k.parallax_err_mas))
      return fmt::format(
          "cluster.parallax_mas: outside space = \"hierarchical\" a cluster's parallax becomes a "
          "modulus prior, which needs a parallax S/N of 10 or more (cluster {} has {:.1f}); give "
          "its "
          "modulus (mu, mu_err) or fit in the hierarchical space",
          k.group, k.parallax_mas / k.parallax_err_mas);
  }
  return "";
}

std::pair<double, double> ClusterOptions::modulus_prior() const {
  if (has_modulus()) return {mu, mu_err};
  return {10.0 - 5.0 * std::log10(parallax_mas),
          5.0 / std::log(10.0) * parallax_err_mas / parallax_mas};
}

std::vector<std::string> FitOptions::group_names() const {
  std::vector<std::string> names;
  for (const auto& a : anchors) names.push_back(a.group);
  for (const auto& k : clusters) names.push_back(k.group);
  return names;
}

double FitOptions::anchor_prior_sigma(std::size_t g) const {
  const auto k = static_cast<Eigen::Index>(g);
  return anchor_covariance.size() ? std::sqrt(anchor_covariance(k, k)) : anchors[g].mu_err;
}

FitOptions fit_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  ConfigSection root = c.root();
  auto f = root.section("fit");
  if (!f)
    throw InputError({path, {}, "fit", "line", "key"}, "config_missing_key",
                     "a [fit] table is required");
  FitOptions o;
  o.config_file = path;
  o.config_sha256 = c.sha256();
  o.input_path = c.resolve_path(f->require_string("input"));
  o.output_path = c.resolve_path(f->string_or("output", o.output_path));
  if (auto r = f->get_string("residuals")) o.residuals_path = c.resolve_path(*r);
  o.space = choice_or(*f, "space", kFitSpaceNames, o.space);
  o.loss = choice_or(*f, "loss", kLossNames, o.loss);
  o.loss_scale = f->number_or("loss_scale", o.loss_scale);
  o.clip_sigma = f->number_or("clip_sigma", o.clip_sigma);
  o.clip_iterations = static_cast<int>(f->integer_or("clip_iterations", o.clip_iterations));
  o.zero_point = choice_or(*f, "zero_point", kZeroPointRecipeNames, o.zero_point);
  o.zero_point_mas = f->number_or("zero_point_mas", o.zero_point_mas);
  if (auto t = f->get_string("zero_point_table_5p")) o.zero_point_table_5p = c.resolve_path(*t);
  if (auto t = f->get_string("zero_point_table_6p")) o.zero_point_table_6p = c.resolve_path(*t);
  o.inflation = choice_or(*f, "inflation", kInflationRecipeNames, o.inflation);
  o.inflation_factor = f->number_or("inflation_factor", o.inflation_factor);
  o.max_ruwe = f->number_or("max_ruwe", o.max_ruwe);
  o.use_known_mu = f->bool_or("use_known_distance", o.use_known_mu);
  o.offset = param_from(*f, "offset", o.offset);
  o.scatter = param_from(*f, "scatter", o.scatter);
  o.hierarchical.prior = choice_or(*f, "distance_prior", kDistancePriorNames, o.hierarchical.prior);
  o.hierarchical.histogram_step = f->number_or("histogram_step_mag", o.hierarchical.histogram_step);
  o.hierarchical.histogram_walk_sigma =
      f->number_or("histogram_smoothing", o.hierarchical.histogram_walk_sigma);
  o.hierarchical.histogram_margin =
      f->number_or("histogram_margin_mag", o.hierarchical.histogram_margin);
  o.hierarchical.histogram_kernel =
      f->number_or("histogram_kernel_fraction", o.hierarchical.histogram_kernel);
  o.hierarchical.quadrature_nodes =
      static_cast<int>(f->integer_or("quadrature_nodes", o.hierarchical.quadrature_nodes));
  o.outlier_shift = param_from(*f, "outlier_mag_shift", o.outlier_shift);
  o.outlier_width = param_from(*f, "outlier_mag_width", o.outlier_width);
  o.hierarchical.outlier_mag_shift = o.outlier_shift.value;
  o.hierarchical.outlier_mag_width = o.outlier_width.value;
  o.outlier_factor = param_from(*f, "outlier_parallax_factor", o.outlier_factor);
  // Named in the config, even free without a value: the user's, so holding it is said.
  if (f->has("outlier_parallax_factor")) o.outlier_factor.has_start = true;
  o.hierarchical.outlier_parallax_factor = o.outlier_factor.value;
  o.hierarchical.outlier_parallax = choice_or(*f, "outlier_parallax_law", kOutlierParallaxLawNames,
                                              o.hierarchical.outlier_parallax);
  o.hierarchical.scatter_correction = choice_or(*f, "scatter_correction", kScatterCorrectionNames,
                                                o.hierarchical.scatter_correction);
  o.hierarchical.covariance =
      choice_or(*f, "covariance", kCovarianceEstimateNames, o.hierarchical.covariance);
  o.outlier_fraction = param_from(*f, "outlier_fraction", o.outlier_fraction);
  o.hierarchical.blends =
      choice_or(*f, "blend_component", kBlendComponentNames, o.hierarchical.blends);
  o.hierarchical.blend_min_mag = f->number_or("blend_min_mag", o.hierarchical.blend_min_mag);
  o.blend_fraction = param_from(*f, "blend_fraction", o.blend_fraction);
  o.blend_scale = param_from(*f, "blend_scale_mag", o.blend_scale);
  o.distance_scale = param_from(*f, "distance_scale_kpc", o.distance_scale);
  o.distance_power = param_from(*f, "distance_power", o.distance_power);
  o.distance_exponent = param_from(*f, "distance_exponent", o.distance_exponent);
  o.feh_mean = param_from(*f, "feh_mean", o.feh_mean);
  o.feh_spread = param_from(*f, "feh_spread", o.feh_spread);
  o.scatter_estimator =
      choice_or(*f, "scatter_estimator", kScatterEstimatorNames, o.scatter_estimator);
  o.joint = f->bool_or("joint", o.joint);
  o.joint_shared_slope = f->bool_or("joint_shared_slope", o.joint_shared_slope);
  o.joint_scatter_correlation =
      param_from(*f, "joint_scatter_correlation", o.joint_scatter_correlation);
  o.joint_blend_ratio = param_from(*f, "joint_blend_ratio", o.joint_blend_ratio);
  // Checked as read: 2^31-1 used to wrap to a negative count or ask for 30 GB.
  const std::int64_t bootstrap = f->integer_or("bootstrap", o.bootstrap);
  if (bootstrap < 0 || bootstrap > kMaxBootstrap)
    f->fail("bootstrap",
            fmt::format("must be 0 to {} resamples, not {}", kMaxBootstrap, bootstrap));
  o.bootstrap = static_cast<int>(bootstrap);
  const std::int64_t joint_bootstrap = f->integer_or("joint_bootstrap", o.joint_bootstrap);
  if (joint_bootstrap < -1 || joint_bootstrap > kMaxBootstrap)
    f->fail("joint_bootstrap",
            fmt::format("must be 0 to {} resamples, or -1 (as bootstrap), not {}", kMaxBootstrap,
                        joint_bootstrap));
  o.joint_bootstrap = static_cast<int>(joint_bootstrap);
  o.seed = static_cast<std::uint64_t>(f->integer_or("seed", static_cast<std::int64_t>(o.seed)));
  o.threads = static_cast<int>(f->integer_or("threads", o.threads));
  for (const auto& r : root.section_list("relation")) {
    RelationOptions rel;
    rel.band = r.string_or("band", "");
    rel.name = r.string_or("name", rel.band);
    rel.magnitude_column = r.string_or("magnitude_column", "");
    rel.error_column = r.string_or("error_column", "");
    if (rel.name.empty()) rel.name = rel.magnitude_column;
    rel.pivot_log_period = r.number_or("pivot_log_period", rel.pivot_log_period);
    rel.alpha = param_from(r, "alpha", rel.alpha);
    rel.slope = param_from(r, "slope", rel.slope);
    rel.slope_long = param_from(r, "beta_long", rel.slope_long);
    rel.gamma = param_from(r, "gamma", rel.gamma);
    rel.break_log_period = r.get_number("break_log_period");
    rel.metallicity = r.bool_or("metallicity", rel.metallicity);
    if (auto v = r.get_string_list("classes")) rel.classes = *v;
    if (auto v = r.get_string_list("modes")) rel.modes = *v;
    rel.fundamentalize = r.bool_or("fundamentalize", rel.fundamentalize);
    if (auto v = r.get_number_list("log_period_range")) {
      if (v->size() != 2) r.fail("log_period_range", "must be [min, max]");
      rel.min_log_period = (*v)[0];
      rel.max_log_period = (*v)[1];
    }
    o.relations.push_back(rel);
  }
  for (const auto& a : root.section_list("anchor")) {
    AnchorOptions an;
    an.group = a.require_string("group");
    an.mu = a.number_or("mu", 0.0);
    an.mu_err = a.number_or("mu_err", 0.0);
    o.anchors.push_back(an);
  }
  for (const auto& k : root.section_list("cluster")) {
    ClusterOptions cl;
    cl.group = k.require_string("group");
    cl.parallax_mas = k.number_or("parallax_mas", cl.parallax_mas);
    cl.parallax_err_mas = k.number_or("parallax_err_mas", cl.parallax_err_mas);
    cl.mu = k.number_or("mu", cl.mu);
    cl.mu_err = k.number_or("mu_err", cl.mu_err);
    o.clusters.push_back(cl);
  }
  o.cluster_member_max_sigma = f->number_or("cluster_member_max_sigma", o.cluster_member_max_sigma);
  if (auto rows = f->get_number_rows("anchor_covariance")) {
    const auto n = static_cast<Eigen::Index>(rows->size());
    o.anchor_covariance.resize(n, n);
    for (Eigen::Index i = 0; i < n; ++i) {
      if (static_cast<Eigen::Index>((*rows)[static_cast<std::size_t>(i)].size()) != n)
        f->fail("anchor_covariance",
                fmt::format("row {} has {} entries; the matrix must be square ({} x {})", i + 1,
                            (*rows)[static_cast<std::size_t>(i)].size(), n, n));
      for (Eigen::Index k = 0; k < n; ++k)
        o.anchor_covariance(i, k) =
            (*rows)[static_cast<std::size_t>(i)][static_cast<std::size_t>(k)];
    }
  }
  c.check_unknown_keys();
  throw_if_invalid(o.check(), path);
  return o;
}

std::string fit_residuals_path(const FitOptions& o) {
  return o.residuals_path.empty() ? path_beside(o.output_path, "_residuals.fits")
                                  : o.residuals_path;
}

StageFiles declared_files(const FitOptions& o) {
  StageFiles f;
  f.add_input(o.input_path);
  f.add_input(o.zero_point_table_5p);
  f.add_input(o.zero_point_table_6p);
  f.outputs = {o.output_path, fit_residuals_path(o)};
  return f;
}

}  // namespace rungcal
