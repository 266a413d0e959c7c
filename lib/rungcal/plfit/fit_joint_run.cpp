// SPDX-License-Identifier: MIT
#include "rungcal/plfit/fit_parts.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <filesystem>
#include <map>
#include <numbers>
#include <optional>
#include <thread>

#include <fmt/format.h>
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
namespace {

double coefficient_of(const StarTable* coefficients, const std::string& name) {
  namespace C = coefficient_col;
  if (!coefficients || !coefficients->has(C::kName) || !coefficients->has(C::kAOverEbv)) return 0.0;
  const Column& n = coefficients->column(C::kName);
  for (std::size_t i = 0; i < n.size(); ++i)
    if (!n.is_null(i) && n.text[i] == name) return coefficients->column(C::kAOverEbv).as_real(i);
  return 0.0;
}

// Anchor-galaxy and cluster stars share their group's modulus.
JointStarKind joint_star_kind(CalibratorKind kind) {
  if (kind == CalibratorKind::kParallax) return JointStarKind::kParallax;
  return kind == CalibratorKind::kKnownDistance ? JointStarKind::kKnownDistance
                                                : JointStarKind::kGroup;
}

}  // namespace

JointData joint_data_of(const FitOptions& o, const std::vector<RelationResult>& fits,
                        const StarTable& cat, const StarTable* coefficients) {
  JointData d;
  // Entries: every relation in which a star was used, as whichever kind of calibrator.
  d.relations = static_cast<int>(fits.size());
  const std::vector<std::string> groups = o.group_names();
  auto anchor_index = [&](std::size_t row) {
    const std::string g = cat.has(col::kGroup) && !cat.column(col::kGroup).is_null(row)
                              ? cat.column(col::kGroup).text[row]
                              : "";
    for (std::size_t a = 0; a < groups.size(); ++a)
      if (groups[a] == g) return static_cast<int>(a);
    return -1;
  };
  for (std::size_t row = 0; row < cat.rows(); ++row) {
    int added = 0;
    std::optional<JointStarKind> kind;
    double plx = 0, plx_err = 0;
    bool member_parallax = false;
    const double se = cat.has(col::kEbvErr) ? cat.column(col::kEbvErr).as_real(row) : 0.0;
    const double se2 = std::isfinite(se) ? se * se : 0.0;
    for (std::size_t r = 0; r < fits.size(); ++r) {
      const StarOutcome& s = fits[r].stars[row];
      if (!s.used) continue;
      const JointStarKind k = joint_star_kind(s.kind);
      if (kind && k != *kind) continue;  // the same star is the same kind in every relation
      kind = k;
      if (added == 0) d.first.push_back(static_cast<int>(d.relation.size()));
      const std::string& band = fits[r].relation.band;
      const double c =
          fits[r].relation.magnitude_column.empty() ? coefficient_of(coefficients, band) : 0.0;
      d.relation.push_back(static_cast<int>(r));
      d.x.push_back(s.log_period - fits[r].relation.pivot_log_period);
      d.m0.push_back(s.m0);
      // mag0_err holds the photometric and E(B-V) parts in quadrature: keep the first here.
      d.var_phot.push_back(std::max(s.m0_err * s.m0_err - c * c * se2, 1e-8));
      d.coefficient.push_back(c);
      plx = s.plx, plx_err = s.plx_err;
      member_parallax = s.member_parallax;
      ++added;
    }
    if (added == 0) continue;
    const bool own =
        kind == JointStarKind::kParallax || (kind == JointStarKind::kGroup && member_parallax);
    d.kind.push_back(*kind);
    d.plx.push_back(own ? plx : 0.0);
    d.var_plx.push_back(own ? plx_err * plx_err : 0.0);
    const double mu = cat.has(col::kMu) ? cat.column(col::kMu).as_real(row) : 0.0;
    const double mu_err = cat.has(col::kMuErr) ? cat.column(col::kMuErr).as_real(row) : 0.0;
    const bool known = kind == JointStarKind::kKnownDistance;
    d.mu.push_back(known ? mu : 0.0);
    d.var_mu.push_back(known && std::isfinite(mu_err) ? mu_err * mu_err : 0.0);
    d.group.push_back(kind == JointStarKind::kGroup ? anchor_index(row) : -1);
    d.var_ebv.push_back(coefficients ? se2 : 0.0);
    const double feh = cat.has(col::kFeh) ? cat.column(col::kFeh).as_real(row) : 0.0;
    d.feh.push_back(std::isfinite(feh) ? feh : 0.0);
    const double feh_err = cat.has(col::kFehErr) ? cat.column(col::kFehErr).as_real(row) : 0.0;
    d.var_feh.push_back(std::isfinite(feh_err) ? feh_err * feh_err : 0.0);
    d.row.push_back(row);
  }
  d.first.push_back(static_cast<int>(d.relation.size()));
  d.group_plx = cluster_parallaxes(o);
  return d;
}

void run_joint_bootstrap(const FitOptions& o, JointResult& jr, const JointSampleSolve& solve,
                         bool counted) {
  if (o.joint_resamples() <= 0) return;
  const JointData& d = jr.data;
  ModelTerms terms;
  terms.n_anchors = jr.layout.n_anchors;
  terms.n_clusters = static_cast<int>(o.clusters.size());
  const int first_cluster = terms.n_anchors - terms.n_clusters;
  // Strata: parallax stars, known-distance stars, and each anchor galaxy's stars; each
  // cluster's stars form a unit.
  std::map<int, std::vector<int>> strata, clusters;
  for (int i = 0; i < d.stars(); ++i) {
    const auto si = static_cast<std::size_t>(i);
    const bool grouped = d.kind[si] == JointStarKind::kGroup;
    if (grouped && d.group[si] >= first_cluster)
      clusters[d.group[si]].push_back(i);
    else
      strata[grouped ? 2 + d.group[si] : static_cast<int>(d.kind[si])].push_back(i);
  }
  auto resample = [&](Random& rng) -> std::optional<Eigen::VectorXd> {
    std::vector<int> stars;
    for (const auto& [key, members] : strata)
      for (std::size_t k = 0; k < members.size(); ++k)
        stars.push_back(members[rng.below(members.size())]);
    const std::vector<int> drawn = draw_clusters(terms, rng);
    for (int g : drawn)
      if (auto it = clusters.find(g); it != clusters.end())
        stars.insert(stars.end(), it->second.begin(), it->second.end());
    JointData sample = counted ? d.take_counted(stars) : d.take(stars);
    weigh_cluster_parallaxes(terms, drawn, sample.group_plx);
    std::optional<Eigen::VectorXd> theta = solve(sample, rng);
    if (theta) forget_undrawn_clusters(terms, jr.layout.anchor0, drawn, *theta);
    return theta;
  };
  FitOptions resampled = o;
  resampled.bootstrap = o.joint_resamples();
  jr.bootstrap =
      parallel_bootstrap(resampled, jr.layout.size, "joint", resample, jr.bootstrap_failed);
}

void check_joint_sample(const FitOptions& o, const StarTable* coefficients, JointResult& jr) {
  jr.stars = jr.data.stars();
  if (jr.stars < 3)
    throw InputError({o.input_path, {}, {}}, "too_few_calibrators",
                     "the joint fit has fewer than 3 calibrators");
  if (!coefficients)
    jr.warnings.push_back(
        "no COEFFS table: E(B-V) errors are taken as independent between relations");
}

JointResult run_joint(const FitOptions& o, const std::vector<RelationResult>& fits,
                      const StarTable& cat, const StarTable* coefficients) {
  if (o.space == FitSpace::kHierarchical) {
    return run_joint_hierarchical(o, fits, joint_data_of(o, fits, cat, coefficients), coefficients);
  }
  JointResult jr;
  jr.method = "gls";
  jr.warnings.push_back(
      "the GLS joint fit is biased on realistic data (docs/method.md); the hierarchical space fits "
      "the relations "
      "jointly without that bias");
  std::vector<bool> metallicity;
  for (const auto& rr : fits) {
    jr.relations.push_back(rr.relation.name);
    metallicity.push_back(rr.relation.metallicity);
  }
  const std::vector<std::string> anchor_names = o.group_names();
  jr.layout = JointLayout::make(jr.relations, metallicity, o.joint_shared_slope, anchor_names);
  const JointLayout& L = jr.layout;
  JointSettings js;
  js.loss = o.loss;
  js.loss_scale = o.loss_scale;
  js.scatter_correlation = o.joint_scatter_correlation.value;
  js.fixed.assign(L.size, false);
  for (std::size_t g = 0; g < o.anchors.size(); ++g)
    js.anchor_priors.emplace_back(o.anchors[g].mu, o.anchor_prior_sigma(g));
  // Clusters, by their modulus prior (ClusterOptions::modulus_prior), are independent of the
  // anchors.
  for (const ClusterOptions& k : o.clusters) js.anchor_priors.push_back(k.modulus_prior());
  if (o.anchor_covariance.size()) {
    const auto n = static_cast<Eigen::Index>(anchor_names.size()), a = o.anchor_covariance.rows();
    js.anchor_correlation = Eigen::MatrixXd::Identity(n, n);
    js.anchor_correlation.topLeftCorner(a, a) = correlation_of(o.anchor_covariance);
  }
  if (o.offset.mode == ParamMode::kFixed) js.fixed[L.offset] = true;
  if (o.offset.mode == ParamMode::kPrior)
    jr.warnings.push_back("the offset's prior is not used by the joint fit (free there)");
  Eigen::VectorXd start = Eigen::VectorXd::Zero(L.size);
  double offset_sum = 0;
  for (std::size_t r = 0; r < fits.size(); ++r) {
    const RelationResult& rr = fits[r];
    js.sigma_int.push_back(rr.parameter("sigma_int"));
    start[L.alpha[r]] = rr.parameter("alpha");
    start[L.beta[r]] = rr.parameter("beta");
    if (rr.settings.params[rr.layout.beta].mode == ParamMode::kFixed) js.fixed[L.beta[r]] = true;
    if (L.gamma[r] >= 0) start[L.gamma[r]] = rr.parameter("gamma");
    offset_sum += rr.parameter("parallax_offset_mas");
  }
  for (std::size_t a = 0; a < anchor_names.size(); ++a)
    start[L.anchor0 + static_cast<int>(a)] = fits[0].parameter("mu_" + anchor_names[a]);
  start[L.offset] = o.offset.mode == ParamMode::kFixed
                        ? o.offset.value
                        : offset_sum / static_cast<double>(fits.size());
  JointData& d = jr.data;
  d = joint_data_of(o, fits, cat, coefficients);
  if (!d.has_parallax()) js.fixed[L.offset] = true;  // nothing constrains it
  check_joint_sample(o, coefficients, jr);
  jr.n_free = static_cast<int>(std::count(js.fixed.begin(), js.fixed.end(), false));
  jr.solution = solve_joint(d, js, L, start);
  if (!jr.solution.theta.allFinite())
    throw InputError(
        {o.input_path, {}, {}}, "degenerate_fit",
        "the joint fit has no finite solution; look for absurd values among the calibrators");
  if (!jr.solution.usable)
    jr.warnings.push_back("the joint solver did not reach a usable solution: " +
                          jr.solution.message);
  run_joint_bootstrap(
      o, jr,
      [&](const JointData& sample, Random&) -> std::optional<Eigen::VectorXd> {
        JointSolution s = solve_joint(sample, js, L, jr.solution.theta, false);
        if (!s.usable) return std::nullopt;
        return s.theta;
      },
      false);
  for (const auto& w : jr.warnings) spdlog::warn("joint fit: {}", w);
  return jr;
}

}  // namespace rungcal::fit_parts
