// SPDX-License-Identifier: MIT
// Distances of target Cepheids and of their hosts from a published calibration.
#include "rungcal/calibration/apply.hpp"

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <limits>
#include <map>
#include <optional>
#include <set>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/table/catalog_schema.hpp"

namespace rungcal {
namespace {

constexpr double kLn10Over5 = 2.302585092994045684 / 5.0;

double quadrature_sum(const std::vector<double>& values) {
  double s = 0;
  for (double v : values) s += v * v;
  return std::sqrt(s);
}

// Inverse-variance mean of the stars not flagged: {mean, sum of weights}; sum 0 when none.
std::pair<double, double> weighted_mean(const std::vector<TargetDistance*>& stars) {
  double sw = 0, swm = 0;
  for (const auto* s : stars) {
    if (s->outlier) continue;
    const double w = 1 / (s->stat_error * s->stat_error);
    sw += w, swm += w * s->mu;
  }
  return {sw > 0 ? swm / sw : 0.0, sw};
}

// Flags the stars more than k of their own sigma from the mean of the stars not flagged,
// every flag recomputed on each pass (a star flagged while a real outlier pulled the mean
// comes back once the mean moves), until the flags repeat or the passes run out. A pass
// that would flag every star is not taken.
void flag_outliers(const std::string& host, std::vector<TargetDistance*>& stars,
                   const ApplyOptions& o) {
  for (auto* s : stars) s->outlier = false;
  std::set<std::vector<bool>> seen;
  for (int pass = 0; pass < o.outlier_iterations; ++pass) {
    const double mean = weighted_mean(stars).first;
    std::vector<bool> flags;
    for (const auto* s : stars)
      flags.push_back(std::abs(s->mu - mean) > o.outlier_sigma * s->stat_error);
    std::vector<bool> current;
    for (const auto* s : stars) current.push_back(s->outlier);
    if (flags == current) return;
    if (std::find(flags.begin(), flags.end(), false) == flags.end()) {
      spdlog::warn("{}: every star would be an outlier at {} sigma; the last flags are kept", host,
                   o.outlier_sigma);
      return;
    }
    if (!seen.insert(current).second) break;  // a cycle: stop here
    for (std::size_t i = 0; i < stars.size(); ++i) stars[i]->outlier = flags[i];
  }
  spdlog::warn("{}: the outlier flags did not settle in {} passes; the last pass's flags are kept",
               host, o.outlier_iterations);
}

HostDistance combine(const std::string& host, std::vector<TargetDistance*>& stars,
                     const ApplyResult& r, const ApplyOptions& o) {
  HostDistance h;
  h.host = host;
  h.n_stars = static_cast<int>(stars.size());
  flag_outliers(host.empty() ? "(no host)" : host, stars, o);
  const auto [mean, sw] = weighted_mean(stars);
  h.mu = mean;
  h.stat_error_raw = 1 / std::sqrt(sw);
  double spread = 0;
  int used = 0;
  h.gradient.assign(r.covariance.names.size(), 0.0);
  for (auto* s : stars) {
    if (s->outlier) {
      ++h.n_outliers;
      continue;
    }
    const double w = 1 / (s->stat_error * s->stat_error);
    for (std::size_t j = 0; j < h.gradient.size() && j < s->gradient.size(); ++j)
      h.gradient[j] += w * s->gradient[j] / sw;
    h.chi2 += w * (s->mu - h.mu) * (s->mu - h.mu);
    spread += (s->mu - h.mu) * (s->mu - h.mu);
    ++used;
  }
  h.dof = used - 1;
  h.dispersion = used > 1 ? std::sqrt(spread / (used - 1)) : 0.0;
  h.error_scale = h.dof > 0 ? std::max(1.0, std::sqrt(h.chi2 / h.dof)) : 1.0;
  h.stat_error = h.error_scale * h.stat_error_raw;
  if (h.error_scale > 1)
    spdlog::warn(
        "{}: chi2/dof = {:.2f} > 1: its statistical error is scaled by {:.3f}, {:.4f} -> {:.4f} "
        "mag (the raw figures are kept: mu_stat_err_raw, chi2, dof, error_scale)",
        host.empty() ? "(no host)" : host, h.chi2_per_dof(), h.error_scale, h.stat_error_raw,
        h.stat_error);
  h.calibration_error =
      std::sqrt(std::max(0.0, r.covariance.form(h.gradient, h.gradient, r.calibration_label)));
  h.systematic_shifts = r.systematics.modulus_shifts(h.gradient);
  h.systematic_error = quadrature_sum(h.systematic_shifts);
  h.distance_mpc = parsec_from_distance_modulus(h.mu) / 1e6;
  h.distance_err_mpc = h.distance_mpc * kLn10Over5 * h.total_error();
  return h;
}

}  // namespace

double HostDistance::chi2_per_dof() const {
  return dof > 0 ? chi2 / dof : std::numeric_limits<double>::quiet_NaN();
}

double HostDistance::total_error() const {
  return std::sqrt(stat_error * stat_error + calibration_error * calibration_error +
                   systematic_error * systematic_error);
}

std::string ApplyOptions::check() const {
  if (store.empty()) return "store: required";
  if (calibration.empty()) return "calibration: required (name@latest or name@N)";
  if (relation.empty()) return "relation: required";
  if (targets_path.empty()) return "targets: required";
  if (output_path.empty()) return "out: required";
  if (!(outlier_sigma > 0) || !std::isfinite(outlier_sigma))
    return "outlier_sigma: must be a finite positive number";
  if (outlier_iterations < 1) return "outlier_iterations: must be at least 1";
  return "";
}

ApplyResult apply_calibration(const Calibration& cal, const std::string& relation,
                              const StarTable& t, const ApplyOptions& o,
                              const SystematicShifts& systematics) {
  ApplyResult r;
  r.calibration_label = cal.label();
  r.covariance = parameter_covariance(cal, relation);
  r.systematics = systematics;
  const std::string mag = dereddened_magnitude_column(relation),
                    err = dereddened_magnitude_error_column(relation);
  for (const std::string& c : {std::string(col::kId), std::string(col::kLogPeriod), mag, err})
    if (!t.has(c))
      throw InputError({o.targets_path, {}, c}, "missing_column", "the targets need this column");
  const bool needs_feh = [&] {
    for (const auto& n : r.covariance.names)
      if (n == "gamma") return true;
    return false;
  }();
  std::map<std::string, std::vector<std::size_t>> by_host;
  std::set<std::string> ids;
  for (std::size_t i = 0; i < t.rows(); ++i) {
    const InputLocation at{o.targets_path, static_cast<std::int64_t>(i + 1), ""};
    auto where = [&](const std::string& column) {
      InputLocation w = at;
      w.column = column;
      return w;
    };
    TargetDistance s;
    s.row = i + 1;
    s.id = t.column(col::kId).to_string(i);
    s.host = t.has(col::kGroup) && !t.column(col::kGroup).is_null(i)
                 ? t.column(col::kGroup).to_string(i)
                 : "";
    s.m0 = t.column(mag).as_real(i);
    if (!std::isfinite(s.m0)) continue;  // the target lacks this magnitude
    const double e = t.column(err).as_real(i);
    if (!(std::isfinite(e) && e > 0))
      throw InputError(where(err), "bad_error",
                       fmt::format("'{}': a magnitude's error must be a finite positive number",
                                   t.column(err).to_string(i)));
    const double logp = t.column(col::kLogPeriod).as_real(i);
    if (!std::isfinite(logp))
      throw InputError(where(col::kLogPeriod), "bad_value",
                       fmt::format("'{}': log_period must be a finite number",
                                   t.column(col::kLogPeriod).to_string(i)));
    if (!ids.insert(s.id).second)
      throw InputError(where(col::kId), "duplicate_id", "'" + s.id + "' is in the targets twice");
    std::string klass =
        t.has(col::kClass) ? t.column(col::kClass).to_string(i) : "classical_cepheid";
    std::string mode = t.has(col::kMode) ? t.column(col::kMode).to_string(i) : "fundamental";
    s.log_period = fundamentalized_log_period(klass, mode, logp);
    std::optional<double> feh;
    if (t.has(col::kFeh) && std::isfinite(t.column(col::kFeh).as_real(i)))
      feh = t.column(col::kFeh).as_real(i);
    if (needs_feh && !feh)
      throw InputError(
          where(col::kFeh), "missing_value",
          fmt::format("relation {} of {} has a metallicity term: every target needs [Fe/H]",
                      relation, cal.label()));
    Prediction p = predict_absolute_magnitude(cal, relation, s.log_period, feh);
    s.abs_mag = p.abs_mag;
    s.mu = s.m0 - p.abs_mag;
    s.stat_error = std::hypot(e, p.intrinsic_scatter);
    s.gradient = p.gradient;
    s.calibration_error = p.calibration_error;  // sqrt(g^T C g), every prior included
    s.systematic_error = quadrature_sum(systematics.modulus_shifts(s.gradient));
    s.distance_pc = parsec_from_distance_modulus(s.mu);
    s.distance_err_pc =
        s.distance_pc * kLn10Over5 *
        std::sqrt(s.stat_error * s.stat_error + s.calibration_error * s.calibration_error +
                  s.systematic_error * s.systematic_error);
    by_host[s.host].push_back(r.stars.size());
    r.stars.push_back(s);
  }
  if (r.stars.empty())
    throw InputError({o.targets_path, {}, mag}, "no_rows_left",
                     "no target has this magnitude and its error");
  for (auto& [host, idx] : by_host) {
    std::vector<TargetDistance*> members;
    for (std::size_t i : idx) members.push_back(&r.stars[i]);
    r.hosts.push_back(combine(host, members, r, o));
  }
  return r;
}

}  // namespace rungcal
