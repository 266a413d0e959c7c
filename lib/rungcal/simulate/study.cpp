// SPDX-License-Identifier: MIT
#include "rungcal/simulate/study.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include <fmt/format.h>
#include <fmt/ranges.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/json_io.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/progress.hpp"
#include "rungcal/plfit/fit_parts.hpp"

namespace rungcal {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

double mean_of(const std::vector<double>& v) {
  double s = 0;
  for (double x : v) s += x;
  return v.empty() ? kNaN : s / static_cast<double>(v.size());
}

// The joint fit's estimates, errors and bootstrap errors of the parameters asked for.
void record_joint(const JointResult& j, const std::vector<std::string>& parameters, StudyMock& d) {
  d.ok = j.solution.usable && j.solution.covariance_ok;
  if (!j.solution.usable)
    d.failure = "solver: " + j.solution.termination;
  else if (!j.solution.covariance_ok)
    d.failure = "covariance: the Hessian is not positive definite";
  for (const auto& name : parameters) {
    const auto at = std::find(j.layout.names.begin(), j.layout.names.end(), name);
    if (at == j.layout.names.end() || !d.ok) {
      d.estimate.push_back(kNaN), d.error.push_back(kNaN), d.bootstrap_error.push_back(kNaN);
      d.bootstrap_sd.push_back(kNaN);
      continue;
    }
    const auto p = static_cast<Eigen::Index>(at - j.layout.names.begin());
    d.estimate.push_back(j.solution.theta[p]);
    d.error.push_back(std::sqrt(j.solution.covariance(p, p)));
    const std::vector<double> boot = fit_parts::bootstrap_column(j.bootstrap, static_cast<int>(p));
    d.bootstrap_error.push_back(fit_parts::bootstrap_spread(boot));
    d.bootstrap_sd.push_back(fit_parts::standard_deviation(boot));
  }
}

// The fitted mixture shape, by name, from a layout's names and the solution's theta.
void record_mixture(const std::vector<std::string>& names, const Eigen::VectorXd& theta,
                    StudyMock& d) {
  for (const std::string& name : kMixtureShapeNames) {
    const auto at = std::find(names.begin(), names.end(), name);
    if (at != names.end() && std::isfinite(theta[at - names.begin()]))
      d.mixture[name] = theta[at - names.begin()];
  }
}

}  // namespace

std::string StudyOptions::check() const {
  if (mocks < 2) return "mocks: at least 2";
  if (std::string e = scenario.check(); !e.empty()) return "scenario." + e;
  if (fit.relations.size() != 1 + scenario.more_relations.size())
    return "fit: one relation per mock relation (X, then more_relations in order)";
  if (fit.joint != !scenario.more_relations.empty())
    return "fit.joint: exactly when the mocks have more relations";
  // Each mock's fit, but for its paths and its mock clusters (added per mock): a bad option
  // is refused once here, not by every mock.
  FitOptions each = fit;
  each.input_path = each.output_path = "(mock)";
  if (std::string e = each.check(); !e.empty()) return e;
  return "";
}

StudyResult run_study(const StudyOptions& o) {
  std::vector<StudyMock> draws(static_cast<std::size_t>(o.mocks));
  Progress progress("mocks", draws.size());
  parallel_for(draws.size(), worker_threads(o.threads), [&](std::size_t k) {
    MockScenario s = o.scenario;
    s.seed = o.scenario.seed + k;
    FitOptions fit = o.fit;
    fit.threads = 1;
    fit.seed = s.seed;
    for (const MockCluster& c : mock_clusters(s)) {
      ClusterOptions cluster;
      cluster.group = c.group;
      cluster.parallax_mas = c.parallax_mas;
      cluster.parallax_err_mas = c.parallax_err_mas;
      fit.clusters.push_back(cluster);
    }
    // The anchors enter as a user's [[anchor]] priors would: the published moduli, with
    // their covariance when they are correlated.
    for (const MockAnchor& a : mock_anchors(s))
      fit.anchors.push_back({a.group, a.mu_published, a.mu_err});
    if (o.anchor_covariance && s.anchors > 1 && s.anchor_correlation > 0)
      fit.anchor_covariance = mock_anchor_covariance(s);
    StudyMock& d = draws[k];
    d.seed = s.seed;
    try {
      const StarTable coefficients = mock_coefficients(s);
      FitResult r = run_fit(fit, mock_calibrator_catalog(s),
                            s.more_relations.empty() ? nullptr : &coefficients);
      if (fit.joint) {
        record_joint(*r.joint, o.parameters, d);
        record_mixture(r.joint->layout.names, r.joint->solution.theta, d);
      } else {
        const RelationResult& rr = r.relations.at(0);
        record_mixture(rr.layout.names, rr.solution.theta, d);
        d.ok = rr.solution.usable && rr.covariance_ok;
        if (!rr.solution.usable)
          d.failure = "solver: " + rr.solution.termination;
        else if (!rr.covariance_ok)
          d.failure = "covariance: the Hessian is not positive definite";
        for (const auto& name : o.parameters) {
          const bool has = std::find(rr.layout.names.begin(), rr.layout.names.end(), name) !=
                           rr.layout.names.end();
          d.estimate.push_back(has ? rr.parameter(name) : kNaN);
          d.error.push_back(has ? rr.error(name) : kNaN);
          d.bootstrap_error.push_back(has ? rr.bootstrap_error(name) : kNaN);
          d.bootstrap_sd.push_back(has ? fit_parts::standard_deviation(fit_parts::bootstrap_column(
                                             rr, fit_parts::index_of(rr.layout, name)))
                                       : kNaN);
        }
      }
    } catch (const std::exception& e) {
      spdlog::debug("mock {}: {}", k, e.what());
      d.ok = false;
      d.failure = std::string("refused: ") + e.what();
    }
    progress.advance();
  });
  progress.finish();
  return summarise_study({{"stars", o.scenario.stars},
                          {"truth", o.scenario.truth()},
                          {"mock_draw_layout", kMockDrawLayout},
                          {"space", std::string(kFitSpaceNames.name(o.fit.space))},
                          {"parameter_names", o.parameters}},
                         std::move(draws));
}

StudyResult summarise_study(nlohmann::json header, std::vector<StudyMock> mocks) {
  std::sort(mocks.begin(), mocks.end(),
            [](const StudyMock& a, const StudyMock& b) { return a.seed < b.seed; });
  const auto parameters = header.at("parameter_names").get<std::vector<std::string>>();
  const nlohmann::json& truth = header.at("truth");
  StudyResult out;
  out.mocks = static_cast<int>(mocks.size());
  for (const StudyMock& d : mocks)
    if (!d.ok) {
      ++out.failed;
      out.failures[d.failure].push_back(d.seed);
    }
  for (std::size_t j = 0; j < parameters.size(); ++j) {
    StudyRow row;
    row.parameter = parameters[j];
    row.truth = truth.value(row.parameter, kNaN);
    std::vector<double> est, err, boot, boot_sd;
    int covered = 0, boot_covered = 0;
    for (const StudyMock& d : mocks) {
      if (!d.ok || !std::isfinite(d.estimate[j]) || !std::isfinite(d.error[j])) continue;
      est.push_back(d.estimate[j]);
      err.push_back(d.error[j]);
      covered += std::abs(d.estimate[j] - row.truth) <= d.error[j] ? 1 : 0;
      if (std::isfinite(d.bootstrap_error[j])) {
        boot.push_back(d.bootstrap_error[j]);
        boot_covered += std::abs(d.estimate[j] - row.truth) <= d.bootstrap_error[j] ? 1 : 0;
      }
      if (j < d.bootstrap_sd.size() && std::isfinite(d.bootstrap_sd[j]))
        boot_sd.push_back(d.bootstrap_sd[j]);
    }
    row.used = static_cast<int>(est.size());
    row.mean_estimate = mean_of(est);
    row.mean_error = mean_of(err);
    row.bias_in_errors = (row.mean_estimate - row.truth) / row.mean_error;
    row.coverage = row.used ? static_cast<double>(covered) / row.used : kNaN;
    row.bootstrap_coverage =
        boot.empty() ? kNaN : static_cast<double>(boot_covered) / static_cast<double>(boot.size());
    row.bootstrap_to_covariance = boot.empty() ? kNaN : mean_of(boot) / row.mean_error;
    row.bootstrap_sd_to_covariance = boot_sd.empty() ? kNaN : mean_of(boot_sd) / row.mean_error;
    row.spread_to_error = fit_parts::standard_deviation(est) / row.mean_error;
    row.bias_error = row.spread_to_error / std::sqrt(static_cast<double>(std::max(row.used, 1)));
    out.rows.push_back(row);
  }
  out.header = std::move(header);
  out.per_mock = std::move(mocks);
  return out;
}

nlohmann::json StudyResult::to_json() const {
  nlohmann::json j = header;
  j["mocks"] = mocks;
  j["failed"] = failed;
  for (const auto& [why, seeds] : failures)
    j["failures"].push_back({{"reason", why}, {"seeds", seeds}});
  const auto num = json_number_or_null;
  for (const auto& r : rows)
    j["parameters"].push_back({{"name", r.parameter},
                               {"truth", num(r.truth)},
                               {"mean_estimate", num(r.mean_estimate)},
                               {"mean_error", num(r.mean_error)},
                               {"bias_in_errors", num(r.bias_in_errors)},
                               {"bias_uncertainty", num(r.bias_error)},
                               {"coverage_68", num(r.coverage)},
                               {"bootstrap_coverage_68", num(r.bootstrap_coverage)},
                               {"bootstrap_to_covariance", num(r.bootstrap_to_covariance)},
                               {"bootstrap_sd_to_covariance", num(r.bootstrap_sd_to_covariance)},
                               {"spread_to_error", num(r.spread_to_error)},
                               {"used", r.used}});
  auto numbers = [&](const std::vector<double>& v) {
    nlohmann::json a = nlohmann::json::array();
    for (double x : v) a.push_back(num(x));
    return a;
  };
  j["per_mock"] = nlohmann::json::array();
  for (const StudyMock& d : per_mock) {
    nlohmann::json m = {{"seed", d.seed},
                        {"ok", d.ok},
                        {"estimate", numbers(d.estimate)},
                        {"error", numbers(d.error)},
                        {"bootstrap_error", numbers(d.bootstrap_error)},
                        {"bootstrap_sd", numbers(d.bootstrap_sd)}};
    if (!d.ok) m["failure"] = d.failure;
    if (!d.mixture.empty()) m["mixture"] = d.mixture;
    j["per_mock"].push_back(std::move(m));
  }
  return j;
}

std::string study_table(const StudyResult& r) {
  std::string out = fmt::format("{} mocks, {} failed\n", r.mocks, r.failed);
  for (const auto& [why, seeds] : r.failures)
    out += fmt::format("  failed ({}): seeds {}\n", why, fmt::join(seeds, ", "));
  out += fmt::format("{:<22}{:>10}{:>11}{:>10}{:>14}{:>9}{:>10}{:>10}{:>9}{:>10}\n", "parameter",
                     "truth", "mean", "error", "bias/error", "cov68", "boot68", "boot/cov",
                     "sd/err", "bootsd/cov");
  for (const auto& row : r.rows)
    out += fmt::format(
        "{:<22}{:>10.4f}{:>11.4f}{:>10.4f}{:>8.2f}+-{:<4.2f}{:>9.2f}{:>10.2f}{:>10.2f}{:>9.2f}"
        "{:>10.2f}\n",
        row.parameter, row.truth, row.mean_estimate, row.mean_error, row.bias_in_errors,
        row.bias_error, row.coverage, row.bootstrap_coverage, row.bootstrap_to_covariance,
        row.spread_to_error, row.bootstrap_sd_to_covariance);
  return out;
}

}  // namespace rungcal
