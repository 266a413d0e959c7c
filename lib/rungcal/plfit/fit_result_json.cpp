// SPDX-License-Identifier: MIT
#include "rungcal/plfit/fit_parts.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <filesystem>
#include <map>
#include <numbers>
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
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fit_result_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {
using namespace fit_parts;
namespace {

// A parameter's setting as the result file records it.
nlohmann::json param_json(const ParamSpec& p) {
  return {{"mode", std::string(kParamModeNames.name(p.mode))},
          {"value", p.value},
          {"prior_sigma", p.prior_sigma}};
}

// Per cluster of one relation: its fitted modulus and every member, used or not, with the
// reason (issue: rejections are listed per member).
nlohmann::json clusters_json(const FitOptions& o, const RelationResult& rr) {
  nlohmann::json out = nlohmann::json::array();
  for (const ClusterOptions& k : o.clusters) {
    nlohmann::json members = nlohmann::json::array();
    int used = 0, with_parallax = 0;
    for (const StarOutcome& s : rr.stars) {
      if (s.group != k.group) continue;
      used += s.used ? 1 : 0;
      with_parallax += s.used && s.member_parallax ? 1 : 0;
      members.push_back({{"id", s.id},
                         {"used", s.used},
                         {"own_parallax", s.member_parallax},
                         {"reason", s.reason}});
    }
    const std::string name = "mu_" + k.group;
    const double err = rr.error(name);
    out.push_back({{"group", k.group},
                   {"mu", rr.parameter(name)},
                   {"mu_err", std::isfinite(err) ? nlohmann::json(err) : nlohmann::json(nullptr)},
                   {"n_used", used},
                   {"n_with_own_parallax", with_parallax},
                   {"members", members}});
  }
  return out;
}

// The bootstrap's 16th, 50th and 84th percentiles (none without resamples: written null).
// How the parameter entered the fit: its mode, and its prior where it has one.
void record_setting(FitParameterRecord& record, const ParamSpec& spec) {
  record.mode = spec.mode;
  if (spec.mode == ParamMode::kPrior) record.prior = FitPriorRecord{spec.value, spec.prior_sigma};
}

void set_percentiles(FitParameterRecord& record, const std::vector<double>& boot) {
  record.p16 = percentile(boot, 0.16);
  record.p50 = percentile(boot, 0.50);
  record.p84 = percentile(boot, 0.84);
}

// The parts of a relation's result that other stages read (table/fit_result_schema.hpp).
FitRelationRecord relation_record(const RelationResult& rr) {
  FitRelationRecord r;
  r.name = rr.relation.name;
  r.band = rr.relation.band;
  r.pivot_log_period = rr.relation.pivot_log_period;
  r.break_log_period = rr.relation.break_log_period;
  r.metallicity = rr.relation.metallicity;
  r.parameter_names = rr.layout.names;
  for (int j = 0; j < rr.layout.size; ++j) {
    const std::string& name = rr.layout.names[j];
    const ParamSpec& spec = rr.settings.params[j];
    FitParameterRecord p;
    p.name = name;
    p.value = rr.solution.theta[j];
    record_setting(p, spec);
    p.error = spec.mode == ParamMode::kFixed ? 0.0 : rr.error(name);
    p.bootstrap_error = rr.bootstrap_error(name);
    set_percentiles(p, bootstrap_column(rr, j));
    if (std::find(rr.undetermined.begin(), rr.undetermined.end(), name) != rr.undetermined.end()) {
      p.determined = false;
      p.error.reset();
    }
    r.parameters.push_back(p);
  }
  for (int i = 0; i < rr.layout.size; ++i) {
    std::vector<double> row;
    for (int j = 0; j < rr.layout.size; ++j)
      row.push_back(rr.covariance_ok ? rr.covariance(i, j)
                                     : std::numeric_limits<double>::quiet_NaN());
    r.covariance.push_back(row);
  }
  for (const auto& s : rr.stars) {
    if (s.used)
      r.used.push_back(s.id);
    else
      r.rejected.push_back({s.id, s.reason});
  }
  return r;
}

}  // namespace

nlohmann::json FitResult::to_json(const FitOptions& o) const {
  using nlohmann::json;
  json out;
  out[fit_key::kSchema] = kFitSchemaName;
  out[fit_key::kSchemaVersion] = kFitSchemaVersion;
  out[fit_key::kProvenance] = rungcal::to_json(provenance);
  out[fit_key::kModel] = {{"space", std::string(kFitSpaceNames.name(o.space))},
                  {"loss", std::string(kLossNames.name(o.loss))},
                  {"scatter_estimator", std::string(kScatterEstimatorNames.name(o.scatter_estimator))},
                  {"hierarchical", {{"distance_prior", std::string(kDistancePriorNames.name(o.hierarchical.prior))},
                                    {"quadrature_nodes", o.hierarchical.quadrature_nodes},
                                    {"histogram_step_mag", o.hierarchical.histogram_step},
                                    {"histogram_walk_sigma", o.hierarchical.histogram_walk_sigma},
                                    {"histogram_margin_mag", o.hierarchical.histogram_margin},
                                    {"histogram_kernel_fraction", o.hierarchical.histogram_kernel},
                                    {"outlier_mag_width", o.hierarchical.outlier_mag_width},
                                    {"outlier_mag_shift", o.hierarchical.outlier_mag_shift},
                                    {"outlier_parallax_factor", param_json(o.outlier_factor)},
                                    {"outlier_parallax_law", std::string(kOutlierParallaxLawNames.name(o.hierarchical.outlier_parallax))},
                                    {"scatter_correction", std::string(kScatterCorrectionNames.name(o.hierarchical.scatter_correction))},
                                    {"covariance", std::string(kCovarianceEstimateNames.name(o.hierarchical.covariance))},
                                    {"blend_component", std::string(kBlendComponentNames.name(o.hierarchical.blends))},
                                    {"blend_min_mag", o.hierarchical.blend_min_mag},
                                    {"blend_fraction", param_json(o.blend_fraction)},
                                    {"blend_scale_mag", param_json(o.blend_scale)}}},
                  {"loss_scale", o.loss_scale},
                  {"clip_sigma", o.clip_sigma},
                  {"zero_point", std::string(kZeroPointRecipeNames.name(o.zero_point))},
                  {"zero_point_mas", o.zero_point_mas},
                  {"inflation", std::string(kInflationRecipeNames.name(o.inflation))},
                  {"inflation_factor", o.inflation_factor},
                  {"max_ruwe", o.max_ruwe},
                  {"use_known_distance", o.use_known_mu},
                  {"offset", {{"mode", std::string(kParamModeNames.name(o.offset.mode))}, {"value", o.offset.value}, {"prior_sigma", o.offset.prior_sigma}}},
                  {"scatter", {{"mode", std::string(kParamModeNames.name(o.scatter.mode))}, {"value", o.scatter.value}}},
                  {"anchors", [&] {
                     nlohmann::json a = nlohmann::json::array();
                     for (std::size_t g = 0; g < o.anchors.size(); ++g)
                       a.push_back({{"group", o.anchors[g].group}, {"mu", o.anchors[g].mu}, {"mu_err", o.anchor_prior_sigma(g)}});
                     return a;
                   }()},
                  {"anchor_covariance", [&] {
                     nlohmann::json c = nlohmann::json::array();  // empty: independent
                     for (Eigen::Index i = 0; i < o.anchor_covariance.rows(); ++i) {
                       nlohmann::json row = nlohmann::json::array();
                       for (Eigen::Index k = 0; k < o.anchor_covariance.cols(); ++k) row.push_back(o.anchor_covariance(i, k));
                       c.push_back(row);
                     }
                     return c;
                   }()},
                  {"clusters", [&] {
                     nlohmann::json a = nlohmann::json::array();
                     auto number = [](double v) { return std::isfinite(v) ? json(v) : json(nullptr); };
                     for (const ClusterOptions& k : o.clusters)
                       a.push_back({{"group", k.group},
                                    {"parallax_mas", number(k.parallax_mas)},
                                    {"parallax_err_mas", number(k.parallax_err_mas)},
                                    {"mu", number(k.mu)},
                                    {"mu_err", number(k.mu_err)}});
                     return a;
                   }()},
                  {"cluster_member_max_sigma", o.cluster_member_max_sigma},
                  {"joint", o.joint},
                  {"bootstrap", o.bootstrap},
                  {"joint_bootstrap", o.joint_resamples()},
                  {"seed", o.seed},
                  {"extinction", extinction.is_null() ? nlohmann::json::object() : extinction}};
  auto finite_or_null = [](double v) { return std::isfinite(v) ? json(v) : json(nullptr); };
  for (const auto& rr : relations) {
    json r = rungcal::to_json(relation_record(rr));
    // The relation's resolved selection: with the model and config text, what it was fitted on.
    r[fit_key::kSelection] = {
        {"classes", rr.relation.classes},
        {"modes", rr.relation.modes},
        {"fundamentalize", rr.relation.fundamentalize},
        {"log_period_range",
         {finite_or_null(rr.relation.min_log_period), finite_or_null(rr.relation.max_log_period)}},
        {"magnitude_column", rr.relation.magnitude_column.empty()
                                 ? dereddened_magnitude_column(rr.relation.band)
                                 : rr.relation.magnitude_column},
        {"slope",
         {{"mode", std::string(kParamModeNames.name(rr.relation.slope.mode))},
          {"value", rr.relation.slope.value},
          {"prior_sigma", rr.relation.slope.prior_sigma}}}};
    json corr = json::array();
    for (int i = 0; i < rr.layout.size; ++i) {
      json crow = json::array();
      for (int j = 0; j < rr.layout.size; ++j) {
        double cij =
            rr.covariance_ok ? rr.covariance(i, j) : std::numeric_limits<double>::quiet_NaN();
        double d = rr.covariance_ok ? std::sqrt(rr.covariance(i, i) * rr.covariance(j, j)) : 0.0;
        crow.push_back(d > 0 ? json(cij / d) : json(nullptr));
      }
      corr.push_back(crow);
    }
    r[fit_key::kCovarianceMethod] = rr.covariance_method;
    r[fit_key::kCorrelation] = corr;
    int rejected = 0;
    for (const auto& s : rr.stars) rejected += s.used ? 0 : 1;
    r[fit_key::kStatistics] = {{"chi2", rr.chi2},
                               {"dof", rr.dof},
                               {fit_key::kNUsed, rr.n_used},
                               {"n_rejected", rejected},
                               {"n_clipped", rr.n_clipped},
                               {"n_free_parameters", rr.n_free},
                               {"neg2_log_likelihood", rr.neg2_log_likelihood},
                               {"aic", rr.aic},
                               {"bic", rr.bic},
                               {"bootstrap_resamples", rr.bootstrap.rows()},
                               {"bootstrap_failed", rr.bootstrap_failed}};
    r[fit_key::kSolver] = {{"termination", rr.solution.termination},
                           {"message", rr.solution.message},
                           {"iterations", rr.solution.iterations},
                           {"usable", rr.solution.usable},
                           {"brief_report", rr.solution.brief_report}};
    r[fit_key::kClusters] = clusters_json(o, rr);
    r[fit_key::kWarnings] = rr.warnings;
    r[fit_key::kUndetermined] = rr.undetermined;
    if (rr.layout.distance_bin0 >= 0)
      r[fit_key::kDistancePriorGrid] = {
          {"first_modulus", histogram_start_at(rr.settings.hierarchical, rr.parameter("alpha"))},
          {"step_mag", rr.settings.hierarchical.histogram_step},
          {"kernel_mag",
           rr.settings.hierarchical.histogram_step * rr.settings.hierarchical.histogram_kernel},
          {"bins", rr.layout.distance_bins + 1}};
    out[fit_key::kRelations].push_back(r);
  }
  if (joint) {
    const JointSolution& js = joint->solution;
    json j;
    j["method"] = joint->method;
    j[fit_key::kCovarianceMethod] = joint->covariance_method;
    j[fit_key::kRelations] = joint->relations;
    j["shared_slope"] = o.joint_shared_slope;
    j["scatter_correlation"] = joint->layout.correlation >= 0 ? js.theta[joint->layout.correlation]
                                                              : o.joint_scatter_correlation.value;
    j["scatter_correlation_mode"] =
        joint->layout.correlation >= 0
            ? std::string(kParamModeNames.name(o.joint_scatter_correlation.mode))
            : std::string("fixed");
    j[fit_key::kParameterNames] = joint->layout.names;
    for (int p = 0; p < joint->layout.size; ++p) {
      double e = js.covariance_ok ? std::sqrt(std::max(0.0, js.covariance(p, p))) : std::nan("");
      const std::vector<double> boot = bootstrap_column(joint->bootstrap, p);
      FitParameterRecord record;
      record.name = joint->layout.names[p];
      record.value = js.theta[p];
      record.error = e;
      record.bootstrap_error = bootstrap_spread(boot);
      set_percentiles(record, boot);
      if (!joint->settings.params.empty())  // the GLS fit has no per-parameter settings
        record_setting(record, joint->settings.params[static_cast<std::size_t>(p)]);
      j[fit_key::kParameters].push_back(rungcal::to_json(record));
    }
    json cov = json::array();
    for (int a = 0; a < joint->layout.size; ++a) {
      json row = json::array();
      for (int b = 0; b < joint->layout.size; ++b)
        row.push_back(js.covariance_ok ? finite_or_null(js.covariance(a, b)) : json(nullptr));
      cov.push_back(row);
    }
    j[fit_key::kCovariance] = cov;
    j[fit_key::kStatistics] = {{"chi2", finite_or_null(js.chi2)},
                               {"neg2_log_likelihood", finite_or_null(joint->neg2_log_likelihood)},
                               {"n_stars", joint->stars},
                               {"n_entries", js.entries},
                               {"n_free_parameters", joint->n_free},
                               {"dof", js.entries - joint->n_free},
                               {"bootstrap_resamples", joint->bootstrap.rows()},
                               {"bootstrap_failed", joint->bootstrap_failed}};
    j[fit_key::kSolver] = {{"termination", js.termination},
                           {"message", js.message},
                           {"iterations", js.iterations},
                           {"usable", js.usable}};
    j[fit_key::kWarnings] = joint->warnings;
    j[fit_key::kUndetermined] = joint->undetermined;
    // Stars the mixture gives less than even odds of being members, with the relations' ids.
    j["likely_outliers"] = json::array();
    for (std::size_t i = 0; i < joint->membership.size(); ++i)
      if (joint->membership[i] < 0.5) {
        const std::size_t row = joint->data.row[i];
        const std::string id = relations.empty() ? "" : relations[0].stars[row].id;
        j["likely_outliers"].push_back(
            {{"row", row}, {"id", id}, {"membership", joint->membership[i]}});
      }
    out[fit_key::kJoint] = j;
  }
  return out;
}

std::string fit_summary(const FitResult& result) {
  std::string out;
  if (result.joint) {
    const JointResult& j = *result.joint;
    std::string names;
    for (const auto& n : j.relations) names += (names.empty() ? "" : " + ") + n;
    if (j.method == "hierarchical")
      out += fmt::format("joint ({}, hierarchical): {} stars, {} magnitudes, -2 ln L = {:.2f}\n",
                         names, j.stars, j.solution.entries, j.neg2_log_likelihood);
    else
      out += fmt::format("joint ({}): {} stars, {} magnitudes, chi2 = {:.2f}\n", names, j.stars,
                         j.solution.entries, j.solution.chi2);
    for (int p = 0; p < j.layout.size; ++p) {
      double e = j.solution.covariance_ok ? std::sqrt(std::max(0.0, j.solution.covariance(p, p)))
                                          : std::nan("");
      out += fmt::format("  {:<22} {:>10.4f} +- {:.4f}", j.layout.names[p], j.solution.theta[p], e);
      const double be = bootstrap_spread(bootstrap_column(j.bootstrap, p));
      if (std::isfinite(be)) out += fmt::format("  (bootstrap {:.4f})", be);
      out += "\n";
    }
  }
  for (const auto& rr : result.relations) {
    out += fmt::format("{}: {} stars used, {} refused, chi2/dof = {:.2f}/{}\n", rr.relation.name,
                       rr.n_used, rr.stars.size() - static_cast<std::size_t>(rr.n_used), rr.chi2,
                       rr.dof);
    if (rr.layout.distance_bin0 >= 0)
      out += fmt::format(
          "  distance prior: smooth histogram, {} bins of {:.2f} mag from mu = {:.2f}\n",
          rr.layout.distance_bins + 1, rr.settings.hierarchical.histogram_step,
          histogram_start_at(rr.settings.hierarchical, rr.parameter("alpha")));
    for (int j = 0; j < rr.layout.size; ++j) {
      const std::string& name = rr.layout.names[j];
      if (j >= rr.layout.distance_bin0 && j < rr.layout.distance_bin0 + rr.layout.distance_bins)
        continue;
      if (std::find(rr.undetermined.begin(), rr.undetermined.end(), name) !=
          rr.undetermined.end()) {
        out += fmt::format("  {:<22} {:>10.4f} (not determined: no error)\n", name,
                           rr.solution.theta[j]);
        continue;
      }
      if (rr.settings.params[j].mode == ParamMode::kFixed) {
        out += fmt::format("  {:<22} {:>10.4f} (fixed)\n", name, rr.solution.theta[j]);
        continue;
      }
      double e = rr.error(name);
      if (std::isfinite(e))
        out += fmt::format("  {:<22} {:>10.4f} +- {:.4f}", name, rr.solution.theta[j], e);
      else
        out += fmt::format("  {:<22} {:>10.4f} (on its boundary: no covariance error)", name,
                           rr.solution.theta[j]);
      double be = rr.bootstrap_error(name);
      if (std::isfinite(be)) out += fmt::format("  (bootstrap {:.4f})", be);
      out += "\n";
    }
  }
  return out;
}

}  // namespace rungcal
