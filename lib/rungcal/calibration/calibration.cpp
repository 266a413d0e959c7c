// SPDX-License-Identifier: MIT
#include "rungcal/calibration/calibration.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include <fmt/format.h>

#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/provenance.hpp"

namespace rungcal {

const std::string& Calibration::name() const {
  return document.at(calibration_key::kName).get_ref<const std::string&>();
}
int Calibration::version() const { return document.at(calibration_key::kVersion).get<int>(); }
std::string Calibration::label() const { return fmt::format("{}@{}", name(), version()); }

const nlohmann::json& Calibration::fit() const { return document.at(calibration_key::kFit); }

std::vector<std::string> Calibration::relation_names() const {
  std::vector<std::string> out;
  for (const auto& r : fit().at(fit_key::kRelations))
    out.push_back(r.at(fit_key::kName).get<std::string>());
  return out;
}

std::string calibration_content_sha256(const nlohmann::json& fit, const std::string& config_text) {
  nlohmann::json f = fit;
  if (f.contains(fit_key::kProvenance)) {
    nlohmann::json& provenance = f[fit_key::kProvenance];
    provenance.erase(fit_key::kCreatedUtc);
    // Input paths and byte hashes stay in the document for provenance but out of the
    // content: an upstream product rewritten with the same numbers differs only in its
    // DATE card, and must not make a new version.
    if (provenance.contains(fit_key::kInputs))
      for (auto& in : provenance[fit_key::kInputs]) {
        in.erase(fit_key::kPath);
        in.erase(fit_key::kSha256);
      }
  }
  // The config by its parsed content: a comment edit is not new content (issue 15).
  nlohmann::json c = {{calibration_key::kFit, f},
                      {calibration_key::kConfigText, canonical_config_text(config_text)}};
  return sha256_hex(c.dump());  // nlohmann::json keeps object keys sorted: a canonical form
}

std::string Calibration::content_sha256() const {
  return calibration_content_sha256(fit(), document.value(calibration_key::kConfigText, ""));
}

const nlohmann::json* Calibration::find_relation(const std::string& name) const {
  for (const auto& r : fit().at(fit_key::kRelations))
    if (r.at(fit_key::kName) == name) return &r;
  return nullptr;
}

const nlohmann::json& Calibration::relation(const std::string& name) const {
  if (const nlohmann::json* r = find_relation(name)) return *r;
  throw InputError({label(), {}, name, "row", "relation"}, "unknown_relation",
                   "the calibration has no relation of this name");
}

FitRelationRecord Calibration::relation_record(const std::string& name) const {
  return fit_relation_from_json(relation(name));
}

std::optional<FitRelationRecord> Calibration::find_relation_record(const std::string& name) const {
  if (const nlohmann::json* r = find_relation(name)) return fit_relation_from_json(*r);
  return std::nullopt;
}

ParameterCovariance parameter_covariance(const Calibration& cal, const std::string& relation) {
  const FitRelationRecord rel = cal.relation_record(relation);
  ParameterCovariance c;
  c.names = rel.parameter_names;
  const auto n = static_cast<Eigen::Index>(c.names.size());
  c.matrix = Eigen::MatrixXd::Zero(n, n);
  c.from_prior.assign(c.names.size(), false);
  auto at = [&](Eigen::Index i, Eigen::Index j) {
    return rel.covariance.at(static_cast<std::size_t>(i)).at(static_cast<std::size_t>(j));
  };
  for (Eigen::Index i = 0; i < n; ++i) {
    const FitParameterRecord& p = rel.parameters.at(static_cast<std::size_t>(i));
    const double var = at(i, i);
    if (p.fixed()) continue;
    if (std::isfinite(var)) {
      c.matrix(i, i) = var;
    } else if (const double s = p.prior_sigma(); s > 0) {
      c.matrix(i, i) = s * s;
      c.from_prior[static_cast<std::size_t>(i)] = true;
    } else {
      c.matrix(i, i) = std::numeric_limits<double>::quiet_NaN();
    }
  }
  for (Eigen::Index i = 0; i < n; ++i)
    for (Eigen::Index j = 0; j < n; ++j) {
      if (i == j || c.from_prior[static_cast<std::size_t>(i)] ||
          c.from_prior[static_cast<std::size_t>(j)])
        continue;
      if (!std::isfinite(c.matrix(i, i)) || !std::isfinite(c.matrix(j, j)) || c.matrix(i, i) == 0 ||
          c.matrix(j, j) == 0)
        continue;
      const double v = at(i, j);
      if (std::isfinite(v)) c.matrix(i, j) = v;
    }
  return c;
}

double ParameterCovariance::form(const std::vector<double>& g, const std::vector<double>& h,
                                 const std::string& label) const {
  const auto n = static_cast<std::size_t>(matrix.rows());
  for (std::size_t j = 0; j < n && j < g.size() && j < h.size(); ++j)
    if ((g[j] != 0 || h[j] != 0) &&
        !std::isfinite(matrix(static_cast<Eigen::Index>(j), static_cast<Eigen::Index>(j))))
      throw InputError(
          {label, {}, names[j], "row", "parameter"}, "undetermined_parameter",
          "the calibration gives no error for this parameter (free, with no variance and no "
          "prior), and the prediction depends on it: its calibration error would be understated");
  double v = 0;
  for (std::size_t i = 0; i < n && i < g.size(); ++i)
    for (std::size_t j = 0; j < n && j < h.size(); ++j)
      if (g[i] != 0 && h[j] != 0)
        v += g[i] * h[j] * matrix(static_cast<Eigen::Index>(i), static_cast<Eigen::Index>(j));
  return v;
}

double calibration_error_of(const Calibration& cal, const std::string& relation,
                            const std::vector<double>& grad) {
  return std::sqrt(std::max(
      0.0, parameter_covariance(cal, relation).form(grad, grad, cal.label() + " " + relation)));
}

Prediction predict_absolute_magnitude(const Calibration& cal, const std::string& relation,
                                      double log_period, std::optional<double> feh) {
  const FitRelationRecord rel = cal.relation_record(relation);
  const std::size_t n = rel.parameter_names.size();
  std::vector<double> value(n), grad(n, 0.0);
  double sigma = 0.0;
  for (std::size_t j = 0; j < n; ++j) value[j] = rel.parameters.at(j).value;
  const double x = log_period - rel.pivot_log_period;
  Prediction p;
  for (std::size_t j = 0; j < n; ++j) {
    const std::string& name = rel.parameter_names[j];
    double g = 0;
    if (name == "alpha")
      g = 1.0;
    else if (name == "beta")
      g = x;
    else if (name == "beta_long")
      g = std::max(0.0, log_period - rel.break_log_period.value());
    else if (name == "gamma") {
      if (!feh)
        throw InputError({cal.label(), {}, relation, "row", "relation"}, "missing_value",
                         "the relation has a metallicity term: [Fe/H] is needed");
      g = *feh;
    } else if (name == "sigma_int") {
      sigma = value[j];
    }
    grad[j] = g;
    p.abs_mag += g * value[j];
  }
  p.calibration_error = calibration_error_of(cal, relation, grad);
  p.intrinsic_scatter = sigma;
  p.gradient = grad;
  return p;
}

}  // namespace rungcal
