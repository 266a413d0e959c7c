// SPDX-License-Identifier: MIT
#include "rungcal/calibration/calibration.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/provenance.hpp"

namespace rungcal {

namespace {

[[noreturn]] void schema_error(const std::string& where, const std::string& rule,
                               const std::string& key, const std::string& message) {
  throw InputError({where, {}, key, "row", "key"}, rule, message);
}

bool finite_number(const nlohmann::json& v) {
  return v.is_number() && std::isfinite(v.get<double>());
}

const nlohmann::json& member(const nlohmann::json& object, const std::string& key,
                             const std::string& path, const std::string& where) {
  auto it = object.find(key);
  if (it == object.end()) schema_error(where, "fit_schema", path + key, "missing");
  return *it;
}

void require_finite(const nlohmann::json& object, const std::string& key, const std::string& path,
                    const std::string& where) {
  const nlohmann::json& v = member(object, key, path, where);
  if (!finite_number(v))
    schema_error(where, "fit_schema", path + key,
                 fmt::format("must be a finite number, not {}", v.dump().substr(0, 40)));
}

void require_string(const nlohmann::json& object, const std::string& key, const std::string& path,
                    const std::string& where) {
  if (!member(object, key, path, where).is_string())
    schema_error(where, "fit_schema", path + key, "must be a string");
}

// A parameter's prior sigma ({"prior": {"mean", "sigma"}}), 0 when it has none.
double prior_sigma(const nlohmann::json& parameter) {
  auto prior = parameter.find("prior");
  if (prior == parameter.end() || !prior->is_object()) return 0.0;
  auto sigma = prior->find("sigma");
  if (sigma == prior->end() || !finite_number(*sigma)) return 0.0;
  return std::max(0.0, sigma->get<double>());
}

}  // namespace

void check_fit_document(const nlohmann::json& fit, const std::string& where) {
  if (!fit.is_object())
    schema_error(where, "fit_schema", "", "the fit result must be a JSON object");
  const nlohmann::json& relations = member(fit, "relations", "", where);
  if (!relations.is_array())
    schema_error(where, "fit_schema", "relations", "must be an array of relations");
  for (std::size_t i = 0; i < relations.size(); ++i) {
    const nlohmann::json& r = relations[i];
    const std::string at = fmt::format("relations[{}].", i);
    if (!r.is_object())
      schema_error(where, "fit_schema", at.substr(0, at.size() - 1), "must be an object");
    require_string(r, "name", at, where);
    require_finite(r, "pivot_log_period", at, where);
    if (r.contains("break_log_period")) require_finite(r, "break_log_period", at, where);
    const nlohmann::json& names = member(r, "parameter_names", at, where);
    if (!names.is_array())
      schema_error(where, "fit_schema", at + "parameter_names", "must be an array of strings");
    for (const auto& n : names)
      if (!n.is_string())
        schema_error(where, "fit_schema", at + "parameter_names", "must be an array of strings");
    const nlohmann::json& params = member(r, "parameters", at, where);
    if (!params.is_array() || params.size() != names.size())
      schema_error(
          where, "fit_schema", at + "parameters",
          fmt::format("must be an array of {} parameters, one per parameter name", names.size()));
    for (std::size_t j = 0; j < params.size(); ++j) {
      const std::string pat = fmt::format("{}parameters[{}].", at, j);
      if (!params[j].is_object())
        schema_error(where, "fit_schema", pat.substr(0, pat.size() - 1), "must be an object");
      require_string(params[j], "name", pat, where);
      require_string(params[j], "mode", pat, where);
      require_finite(params[j], "value", pat, where);
      const nlohmann::json& e = member(params[j], "error", pat, where);
      if (!e.is_null() && !finite_number(e))
        schema_error(where, "fit_schema", pat + "error", "must be a finite number or null");
    }
    const nlohmann::json& cov = member(r, "covariance", at, where);
    bool square = cov.is_array() && cov.size() == names.size();
    for (std::size_t j = 0; square && j < cov.size(); ++j) {
      square = cov[j].is_array() && cov[j].size() == names.size();
      for (std::size_t k = 0; square && k < cov[j].size(); ++k)
        square = cov[j][k].is_null() || finite_number(cov[j][k]);
    }
    if (!square)
      schema_error(
          where, "fit_schema", at + "covariance",
          fmt::format("must be a {0} x {0} array of finite numbers or nulls", names.size()));
    if (r.contains("used")) {
      const nlohmann::json& used = r.at("used");
      bool ok = used.is_array();
      for (std::size_t k = 0; ok && k < used.size(); ++k) ok = used[k].is_string();
      if (!ok) schema_error(where, "fit_schema", at + "used", "must be an array of star ids");
    }
  }
}

void check_calibration_document(const nlohmann::json& document, const std::string& where) {
  if (!document.is_object())
    schema_error(where, "calibration_schema", "", "a calibration file is a JSON object");
  auto name = document.find("name");
  if (name == document.end() || !name->is_string())
    schema_error(where, "calibration_schema", "name", "missing, or not a string");
  auto version = document.find("version");
  if (version == document.end() || !version->is_number_integer())
    schema_error(where, "calibration_schema", "version", "missing, or not an integer");
  auto fit = document.find("fit");
  if (fit == document.end()) schema_error(where, "calibration_schema", "fit", "missing");
  check_fit_document(*fit, where);
}

const std::string& Calibration::name() const { return document.at("name").get_ref<const std::string&>(); }
int Calibration::version() const { return document.at("version").get<int>(); }
std::string Calibration::label() const { return fmt::format("{}@{}", name(), version()); }

std::vector<std::string> Calibration::relation_names() const {
  std::vector<std::string> out;
  for (const auto& r : document.at("fit").at("relations")) out.push_back(r.at("name").get<std::string>());
  return out;
}

std::string calibration_content_sha256(const nlohmann::json& fit, const std::string& config_text) {
  nlohmann::json f = fit;
  if (f.contains("provenance")) {
    f["provenance"].erase("created_utc");
    // Input paths and byte hashes stay in the document for provenance but out of the
    // content: an upstream product rewritten with the same numbers differs only in its
    // DATE card, and must not make a new version.
    if (f["provenance"].contains("inputs"))
      for (auto& in : f["provenance"]["inputs"]) {
        in.erase("path");
        in.erase("sha256");
      }
  }
  // The config by its parsed content: a comment edit is not new content (issue 15).
  nlohmann::json c = {{"fit", f}, {"config_text", canonical_config_text(config_text)}};
  return sha256_hex(c.dump());  // nlohmann::json keeps object keys sorted: a canonical form
}

std::string Calibration::content_sha256() const {
  return calibration_content_sha256(document.at("fit"), document.value("config_text", ""));
}

const nlohmann::json* Calibration::find_relation(const std::string& name) const {
  for (const auto& r : document.at("fit").at("relations"))
    if (r.at("name") == name) return &r;
  return nullptr;
}

const nlohmann::json& Calibration::relation(const std::string& name) const {
  if (const nlohmann::json* r = find_relation(name)) return *r;
  throw InputError({label(), {}, name, "row", "relation"}, "unknown_relation", "the calibration has no relation of this name");
}

ParameterCovariance parameter_covariance(const Calibration& cal, const std::string& relation) {
  const nlohmann::json& rel = cal.relation(relation);
  const auto& cov = rel.at("covariance");
  const auto& params = rel.at("parameters");
  ParameterCovariance c;
  c.names = rel.at("parameter_names").get<std::vector<std::string>>();
  const auto n = static_cast<Eigen::Index>(c.names.size());
  c.matrix = Eigen::MatrixXd::Zero(n, n);
  c.from_prior.assign(c.names.size(), false);
  auto at = [&](Eigen::Index i, Eigen::Index j) {
    const nlohmann::json& v = cov[static_cast<std::size_t>(i)][static_cast<std::size_t>(j)];
    return v.is_null() ? std::numeric_limits<double>::quiet_NaN() : v.get<double>();
  };
  for (Eigen::Index i = 0; i < n; ++i) {
    const nlohmann::json& p = params[static_cast<std::size_t>(i)];
    const std::string mode = p.value("mode", "free");
    const double var = at(i, i);
    if (mode == "fixed") continue;
    if (std::isfinite(var)) {
      c.matrix(i, i) = var;
    } else if (const double s = prior_sigma(p); s > 0) {
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

double calibration_error_of(const Calibration& cal, const std::string& relation, const std::vector<double>& grad) {
  return std::sqrt(std::max(
      0.0, parameter_covariance(cal, relation).form(grad, grad, cal.label() + " " + relation)));
}

Prediction predict_absolute_magnitude(const Calibration& cal, const std::string& relation, double log_period,
                                      std::optional<double> feh) {
  const nlohmann::json* rel = &cal.relation(relation);
  const auto& names = rel->at("parameter_names");
  const auto& params = rel->at("parameters");
  const std::size_t n = names.size();
  std::vector<double> value(n), grad(n, 0.0);
  double sigma = 0.0;
  for (std::size_t j = 0; j < n; ++j) value[j] = params[j].at("value").get<double>();
  const double x = log_period - rel->at("pivot_log_period").get<double>();
  Prediction p;
  for (std::size_t j = 0; j < n; ++j) {
    const std::string name = names[j];
    double g = 0;
    if (name == "alpha") g = 1.0;
    else if (name == "beta") g = x;
    else if (name == "beta_long") g = std::max(0.0, log_period - rel->at("break_log_period").get<double>());
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
