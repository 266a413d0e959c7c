// SPDX-License-Identifier: MIT
#include "rungcal/calibration/calibration.hpp"

#include <cmath>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/provenance.hpp"

namespace rungcal {

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
  nlohmann::json c = {{"fit", f}, {"config_text", config_text}};
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

double calibration_error_of(const Calibration& cal, const std::string& relation, const std::vector<double>& grad) {
  const auto& cov = cal.relation(relation).at("covariance");
  double var = 0;
  for (std::size_t i = 0; i < grad.size(); ++i)
    for (std::size_t j = 0; j < grad.size(); ++j)
      if (grad[i] != 0 && grad[j] != 0 && !cov[i][j].is_null()) var += grad[i] * grad[j] * cov[i][j].get<double>();
  return std::sqrt(std::max(0.0, var));
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
