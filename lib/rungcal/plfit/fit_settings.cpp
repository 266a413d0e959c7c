// SPDX-License-Identifier: MIT
#include "rungcal/plfit/fit_parts.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <filesystem>
#include <map>
#include <numbers>
#include <string_view>
#include <thread>

#include <fmt/format.h>
#include <fmt/ranges.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/byte_buffer.hpp"
#include "rungcal/core/cluster.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/progress.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/plfit/priors.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal::fit_parts {

bool has_feh_errors(const FitData& d) {
  for (const FitData::Common* c : {&d.parallax, &d.known, &d.anchor})
    if (c->var_feh.size() && (c->var_feh > 0).any()) return true;
  return false;
}

FitSettings settings_for(const FitOptions& o, const RelationOptions& rel,
                         const ParameterLayout& L) {
  FitSettings s;
  s.space = o.space;
  s.scatter_estimator = o.scatter_estimator;
  s.loss = o.loss;
  s.loss_scale = o.loss_scale;
  s.terms.pivot_log_period = rel.pivot_log_period;
  s.terms.has_break = rel.break_log_period.has_value();
  s.terms.break_log_period = rel.break_log_period.value_or(0.0);
  s.terms.has_metallicity = rel.metallicity;
  s.terms.n_anchors = static_cast<int>(o.anchors.size() + o.clusters.size());
  s.terms.n_clusters = static_cast<int>(o.clusters.size());
  s.terms.hierarchical = L.outlier >= 0;
  s.terms.feh_errors = L.feh_mean >= 0;
  s.terms.blends = L.blend >= 0;
  s.hierarchical = o.hierarchical;
  s.hierarchical.outlier_parallax_factor = o.outlier_factor.value;  // the start when free
  s.params.assign(L.size, ParamSpec{});
  s.params[L.alpha] = rel.alpha;
  s.params[L.beta] = rel.slope;
  if (L.beta_long >= 0) s.params[L.beta_long] = rel.slope_long;
  if (L.gamma >= 0) s.params[L.gamma] = rel.gamma;
  s.params[L.offset] = o.offset;
  s.params[L.sigma] = o.scatter;
  for (std::size_t g = 0; g < o.anchors.size(); ++g)
    s.params[L.anchor0 + static_cast<int>(g)] =
        ParamSpec{ParamMode::kPrior, o.anchors[g].mu, o.anchor_prior_sigma(g), true};
  if (o.anchor_covariance.size()) s.anchor_prior_correlation = correlation_of(o.anchor_covariance);
  for (std::size_t k = 0; k < o.clusters.size(); ++k) {
    const ClusterOptions& cl = o.clusters[k];
    const auto [mean, sigma] = cl.modulus_prior();
    // In the hierarchical space a cluster's parallax is its own likelihood term (with the
    // offset); elsewhere it enters through the modulus prior it implies.
    const bool prior = cl.has_modulus() || o.space != FitSpace::kHierarchical;
    s.params[L.anchor0 + static_cast<int>(o.anchors.size() + k)] =
        ParamSpec{prior ? ParamMode::kPrior : ParamMode::kFree, mean, prior ? sigma : 0.0, true};
  }
  if (s.terms.hierarchical) {
    s.params[L.outlier] = o.outlier_fraction;
    s.params[L.outlier_shift] = o.outlier_shift;
    s.params[L.outlier_width] = o.outlier_width;
    s.params[L.outlier_factor] = o.outlier_factor;
  }
  if (s.terms.blends) {
    s.params[L.blend] = o.blend_fraction;
    s.params[L.blend_scale] = o.blend_scale;
  }
  if (L.distance_scale >= 0) {
    s.params[L.distance_scale] = o.distance_scale;
    s.params[L.distance_power] = o.distance_power;
    s.params[L.distance_exponent] = o.distance_exponent;
    // The space-density family is the generalised gamma with k = 2, a = 1 (distance_prior.hpp).
    if (o.hierarchical.prior == DistancePriorFamily::kSpaceDensity) {
      if (o.distance_power.mode == ParamMode::kFree && !o.distance_power.has_start)
        s.params[L.distance_power] = ParamSpec{ParamMode::kFixed, 2.0, 0, true};
      if (o.distance_exponent.mode == ParamMode::kFree && !o.distance_exponent.has_start)
        s.params[L.distance_exponent] = ParamSpec{ParamMode::kFixed, 1.0, 0, true};
    }
  }
  if (s.terms.feh_errors) {
    s.params[L.feh_mean] = o.feh_mean;
    s.params[L.feh_spread] = o.feh_spread;
  }
  return s;
}

void hold_unconstrained(const Calibrators& c, RelationResult& rr) {
  const ParameterLayout& L = rr.layout;
  if (L.distance_scale >= 0 && c.data.parallax.size() == 0)
    for (int j : {L.distance_scale, L.distance_power, L.distance_exponent})
      rr.settings.params[j] =
          ParamSpec{ParamMode::kFixed,
                    j == L.distance_scale ? 1.0 : (j == L.distance_power ? 2.0 : 1.0), 0, true};
  // A free parameter the sample cannot measure is held where it starts, with a warning when
  // the config asked for it (`quiet`: it is free by default).
  auto hold = [&](int j, std::string_view why, bool quiet = false) {
    ParamSpec& p = rr.settings.params[static_cast<std::size_t>(j)];
    if (p.mode == ParamMode::kFixed) return;
    if (!quiet)
      rr.warnings.push_back(
          fmt::format("{}: held at {:g}: {}", L.names[static_cast<std::size_t>(j)], p.value, why));
    p = ParamSpec{ParamMode::kFixed, p.value, 0, true};
  };
  // Under the rising and quartic parallax laws the outlier's magnitude shape is that of stars
  // whose distance is given; without any, a free shift or width would leave the Hessian
  // singular.
  const bool given_distances = c.data.known.size() > 0 || c.data.anchor.size() > 0;
  if (L.outlier_shift >= 0 && !given_distances &&
      outlier_parallax_power(rr.settings.hierarchical.outlier_parallax) > 0)
    for (int j : {L.outlier_shift, L.outlier_width})
      hold(j,
           fmt::format("under the {} parallax law it shapes the outliers among stars of given "
                       "distance, and the sample has none",
                       kOutlierParallaxLawNames.name(rr.settings.hierarchical.outlier_parallax)));
  // The outlier's parallax factor shapes stars with a parallax of their own; without any it
  // has nothing to fit.
  const bool own_parallaxes = c.data.parallax.size() > 0 || (c.data.anchor_var_plx > 0).any();
  if (L.outlier_factor >= 0 && !own_parallaxes) {
    const ParamSpec& p = rr.settings.params[static_cast<std::size_t>(L.outlier_factor)];
    hold(L.outlier_factor, "no star has a parallax of its own",
         p.mode == ParamMode::kFree && !p.has_start);
  }
}

std::vector<std::string> undetermined_warnings(
    const std::vector<std::string>& names, const std::function<double(const std::string&)>& value,
    const std::function<std::string(const std::string&)>& other) {
  // Each component's fraction and the prefixes of its shape's names (the joint fit's blend
  // ratios are blend_ratio_<relation>).
  struct Component {
    std::string fraction;
    std::vector<std::string> shape;
  };
  static const Component kComponents[] = {
      {"outlier_fraction", {"outlier_shift_mag", "outlier_width_mag", "outlier_parallax_factor"}},
      {"blend_fraction", {"blend_scale_mag", "blend_ratio_"}},
  };
  auto listed = [&](const std::string& n) {
    return std::find(names.begin(), names.end(), n) != names.end();
  };
  auto component_of = [&](const std::string& n) -> const Component* {
    for (const Component& c : kComponents)
      for (const std::string& prefix : c.shape)
        if (n.starts_with(prefix)) return &c;
    return nullptr;
  };
  std::vector<std::string> out;
  for (const Component& c : kComponents) {
    if (!listed(c.fraction)) continue;
    std::vector<std::string> shape;
    for (const std::string& n : names)
      if (component_of(n) == &c) shape.push_back(n);
    std::string w = undetermined_reason(c.fraction, value(c.fraction));
    if (!shape.empty())
      w += fmt::format(", nor have the component's shape parameters ({})", fmt::join(shape, ", "));
    out.push_back(std::move(w));
  }
  auto is_fraction = [&](const std::string& n) {
    return std::any_of(std::begin(kComponents), std::end(kComponents),
                       [&](const Component& c) { return c.fraction == n; });
  };
  for (const std::string& n : names) {
    const Component* c = component_of(n);
    if (is_fraction(n)) continue;
    if (c && listed(c->fraction)) continue;
    // The blend ratios are the joint fit's: worded as it words its other edges.
    out.push_back(c && !n.starts_with("blend_ratio_") ? undetermined_reason(n, value(n))
                                                      : other(n));
  }
  return out;
}

std::string undetermined_reason(const std::string& name, double value) {
  if (name == "outlier_fraction")
    return fmt::format(
        "outlier_fraction = {:.2g}: the data hold no outliers to measure it by; it has no error",
        value);
  if (name == "blend_fraction")
    return fmt::format(
        "blend_fraction = {:.2g}: the data hold no blends to measure it by; it has no error",
        value);
  if (name == "blend_scale_mag")
    return "blend_scale_mag: without blends their brightening is not measured; it has no error";
  if (name == "outlier_parallax_factor" && outlier_factor_at_floor(value))
    return "outlier_parallax_factor = 3, the floor of its domain (a deviation of three errors or "
           "fewer is a member's): the outliers' parallaxes are not measured to be broader; it has "
           "no error";
  if (name == "outlier_shift_mag" || name == "outlier_width_mag" ||
      name == "outlier_parallax_factor")
    return name + ": without outliers their shape is not measured; it has no error";
  if (name == "sigma_int" && value < 1e-3)
    return fmt::format(
        "sigma_int = {:.2g} mag, on its lower bound: consistent with no intrinsic scatter; it has "
        "no error",
        value);
  return "sigma_int cannot be estimated under a redescending (tukey) loss, which gives distant "
         "stars no weight: "
         "it is not reported as fitted; fix it, or use another loss";
}

int index_of(const ParameterLayout& L, const std::string& name) {
  for (std::size_t j = 0; j < L.names.size(); ++j)
    if (L.names[j] == name) return static_cast<int>(j);
  throw std::out_of_range("no fit parameter named " + name);
}

}  // namespace rungcal::fit_parts
