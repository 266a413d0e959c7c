// SPDX-License-Identifier: MIT
// The hierarchical joint fit as the fit stage runs it: its layout, parameter modes and start
// from the relations' own fits, the solve, the covariance and the bootstrap.
#include <algorithm>
#include <cmath>
#include <optional>

#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/plfit/fit_parts.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/plfit/joint_hierarchical.hpp"
#include "rungcal/plfit/priors.hpp"

namespace rungcal::fit_parts {
namespace {

// The relation whose fit lends the joint fit its shared parameters' modes and starts: the
// first with the [Fe/H] population when feh_errors, else the first.
const RelationResult& shared_source(const std::vector<RelationResult>& fits, bool feh_errors) {
  if (feh_errors)
    for (const auto& rr : fits)
      if (rr.layout.feh_mean >= 0) return rr;
  return fits[0];
}

// Copies parameter `from` of a relation's fit (mode, prior and fitted value) to joint slot `to`.
void take_parameter(const RelationResult& rr, int from, int to, FitSettings& js,
                    Eigen::VectorXd& start) {
  if (from < 0 || to < 0) return;
  js.params[static_cast<std::size_t>(to)] = rr.settings.params[static_cast<std::size_t>(from)];
  start[to] = rr.solution.theta[from];
}

FitSettings joint_settings(const FitOptions& o, const std::vector<RelationResult>& fits,
                           const JointLayout& L, const RelationResult& shared,
                           Eigen::VectorXd& start) {
  FitSettings js = fits[0].settings;
  js.params.assign(static_cast<std::size_t>(L.size), ParamSpec{});
  js.terms.n_anchors = L.n_anchors;
  js.preconditioner = nullptr;
  start = Eigen::VectorXd::Zero(L.size);
  double offset_sum = 0;
  for (std::size_t r = 0; r < fits.size(); ++r) {
    const RelationResult& rr = fits[r];
    take_parameter(rr, rr.layout.alpha, L.alpha[r], js, start);
    take_parameter(rr, rr.layout.beta, L.beta[r], js, start);
    take_parameter(rr, rr.layout.gamma, L.gamma[r], js, start);
    take_parameter(rr, rr.layout.sigma, L.sigma[r], js, start);
    // A scatter the relation's fit left at zero starts just inside its domain.
    start[L.sigma[r]] = std::max(start[L.sigma[r]], 0.01);
    offset_sum += rr.solution.theta[rr.layout.offset];
  }
  const RelationResult& first = fits[0];
  take_parameter(first, first.layout.offset, L.offset, js, start);
  if (js.params[static_cast<std::size_t>(L.offset)].mode != ParamMode::kFixed)
    start[L.offset] = offset_sum / static_cast<double>(fits.size());
  for (int g = 0; g < L.n_anchors; ++g)
    take_parameter(first, first.layout.anchor0 + g, L.anchor0 + g, js, start);
  for (auto [from, to] : {std::pair{first.layout.outlier, L.outlier},
                          {first.layout.outlier_shift, L.outlier_shift},
                          {first.layout.outlier_width, L.outlier_width},
                          {first.layout.outlier_factor, L.outlier_factor},
                          {first.layout.blend, L.blend},
                          {first.layout.blend_scale, L.blend_scale},
                          {first.layout.distance_scale, L.distance_scale},
                          {first.layout.distance_power, L.distance_power},
                          {first.layout.distance_exponent, L.distance_exponent}})
    take_parameter(first, from, to, js, start);
  for (int j = 0; j < L.distance_bins; ++j)
    take_parameter(first, first.layout.distance_bin0 + j, L.distance_bin0 + j, js, start);
  take_parameter(shared, shared.layout.feh_mean, L.feh_mean, js, start);
  take_parameter(shared, shared.layout.feh_spread, L.feh_spread, js, start);
  js.params[static_cast<std::size_t>(L.correlation)] = o.joint_scatter_correlation;
  start[L.correlation] = o.joint_scatter_correlation.value;
  for (int j : L.blend_ratio)
    if (j >= 0)
      js.params[static_cast<std::size_t>(j)] = o.joint_blend_ratio,
      start[j] = o.joint_blend_ratio.value;
  // The histogram's grid: the first relation's, where its fit left it, moving from here on
  // with the mean of the alphas.
  double alpha_mean = 0;
  for (int a : L.alpha) alpha_mean += start[a] / static_cast<double>(L.alpha.size());
  js.hierarchical.histogram_start =
      histogram_start_at(first.settings.hierarchical, start[L.alpha[0]]);
  js.hierarchical.histogram_alpha_ref = alpha_mean;
  return js;
}

}  // namespace

JointResult run_joint_hierarchical(const FitOptions& o, const std::vector<RelationResult>& fits,
                                   JointData data, const StarTable* coefficients) {
  JointResult jr;
  jr.method = "hierarchical";
  jr.data = std::move(data);
  std::vector<bool> metallicity;
  bool feh_errors = false;
  for (const auto& rr : fits) {
    jr.relations.push_back(rr.relation.name);
    metallicity.push_back(rr.relation.metallicity);
    feh_errors = feh_errors || rr.layout.feh_mean >= 0;
  }
  const std::vector<std::string> anchor_names = o.group_names();
  jr.layout = JointLayout::make_hierarchical(jr.relations, metallicity, o.joint_shared_slope,
                                             anchor_names, fits[0].layout, feh_errors);
  const JointLayout& L = jr.layout;
  check_joint_sample(o, coefficients, jr);
  Eigen::VectorXd start;
  FitSettings js = joint_settings(o, fits, L, shared_source(fits, feh_errors), start);
  if (!jr.data.has_parallax())
    js.params[static_cast<std::size_t>(L.offset)].mode =
        ParamMode::kFixed;  // nothing constrains it
  jr.settings = js;
  const FitSolution sol = solve_joint_hierarchical(jr.data, js, L, start);
  if (!sol.theta.allFinite())
    throw InputError(
        {o.input_path, {}, {}}, "degenerate_fit",
        "the joint fit has no finite solution; look for absurd values among the calibrators");
  JointSolution& out = jr.solution;
  out.theta = sol.theta;
  out.usable = sol.usable;
  out.message = sol.message;
  out.termination = sol.termination;
  out.iterations = sol.iterations;
  out.passes = 1;
  out.entries = static_cast<int>(jr.data.relation.size());
  out.chi2 = std::numeric_limits<double>::quiet_NaN();
  jr.neg2_log_likelihood =
      2.0 * joint_hierarchical_value(jr.data, js, L, sol.theta).neg_log_likelihood;
  if (!sol.usable)
    jr.warnings.push_back("the joint solver did not reach a usable solution: " + sol.message);
  std::shared_ptr<const Eigen::MatrixXd> metric;
  const bool want_sandwich = js.hierarchical.covariance == CovarianceEstimate::kSandwich;
  Eigen::MatrixXd sandwich;
  out.covariance_ok =
      joint_hierarchical_covariance(jr.data, js, L, sol.theta, out.covariance, jr.undetermined,
                                    &metric, want_sandwich ? &sandwich : nullptr);
  if (out.covariance_ok && js.hierarchical.scatter_correction == ScatterCorrection::kRestricted) {
    out.theta = joint_hierarchical_restricted(jr.data, js, L, sol.theta, out.covariance);
    jr.restricted_shift = out.theta - sol.theta;
  }
  adopt_sandwich(want_sandwich && out.covariance_ok, sandwich, out.covariance, jr.covariance_method,
                 jr.warnings);
  if (!out.covariance_ok)
    jr.warnings.push_back("the joint fit's Hessian is not positive definite: no covariance");
  auto estimate = [&](const std::string& n) {
    const auto at = std::find(L.names.begin(), L.names.end(), n);
    return at == L.names.end() ? std::nan("") : out.theta[at - L.names.begin()];
  };
  for (std::string& w : undetermined_warnings(jr.undetermined, estimate, [](const std::string& n) {
         return n + " is on the edge of its domain: no error is given";
       }))
    jr.warnings.push_back(std::move(w));
  jr.n_free =
      static_cast<int>(std::count_if(js.params.begin(), js.params.end(), [](const ParamSpec& p) {
        return p.mode != ParamMode::kFixed;
      }));
  const Eigen::ArrayXd q = joint_hierarchical_membership(jr.data, js, L, out.theta);
  jr.membership.assign(q.data(), q.data() + q.size());
  // Resamples start at the optimum under the full sample's metric; 1e-9 in the cost and
  // 1e-8 in the step are far below their spread.
  FitSettings relaxed = js;
  relaxed.preconditioner = metric;
  relaxed.function_tolerance = 1e-9;
  relaxed.parameter_tolerance = 1e-8;
  const AnchorBlock anchors{L.anchor0, L.n_anchors - js.terms.n_clusters,
                            js.anchor_prior_correlation};
  run_joint_bootstrap(
      o, jr,
      [&](const JointData& sample, Random& rng) -> std::optional<Eigen::VectorXd> {
        FitSettings drawn = relaxed;
        redraw_prior_centres(drawn.params, anchors,
                             rng);  // the priors' spread, as the covariance has it
        const FitSolution s = solve_joint_hierarchical(sample, drawn, L, jr.solution.theta);
        if (!s.usable) return std::nullopt;
        return s.theta;
      },
      true);
  shift_resamples(jr.restricted_shift, jr.bootstrap);
  for (const auto& w : jr.warnings) spdlog::warn("joint fit: {}", w);
  return jr;
}

}  // namespace rungcal::fit_parts
