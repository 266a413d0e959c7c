// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

namespace rungcal {

// Schema version of calibration files (docs/file-formats.md, "Calibration file").
inline constexpr int kCalibrationSchemaVersion = 1;

// A published calibration file: {schema, schema_version, name, version, published_utc,
// content_sha256, previous {version, content_sha256, shifts}, config_text, fit}, where fit
// is the rungcal-fit result it was made from (parameters, covariance, statistics, rejected
// stars, provenance and model).
struct Calibration {
  nlohmann::json document;  // the whole calibration file

  const std::string& name() const;
  int version() const;
  // SHA-256 of what defines the calibration: the fit result and the config text, without
  // the fit's creation time and input paths (inputs count by their SHA-256), so the same
  // inputs, config and code give the same hash wherever and whenever they run.
  std::string content_sha256() const;
  // "name@version" of the calibration, or of a relation in it.
  std::string label() const;
  std::vector<std::string> relation_names() const;
  // The relation of this name in the fit result, or nullptr.
  const nlohmann::json* find_relation(const std::string& name) const;
  // The same, or InputError (rule "unknown_relation").
  const nlohmann::json& relation(const std::string& name) const;
};

// Checks the parts of a rungcal-fit result (fit.json, or a calibration's "fit") that
// publish, diff, apply and report read: "relations" an array of objects, each with a string
// "name", finite numbers "pivot_log_period" (and "break_log_period" when present),
// "parameter_names" strings, "parameters" objects with a string "name" and "mode", a finite
// "value" and an "error" that is a finite number or null, and "covariance" a square array
// of arrays of numbers or nulls, one row per parameter; "used" (when present) strings.
// Throws InputError (rule "fit_schema") naming the first part that is missing or of the
// wrong type, with `where` as the file.
void check_fit_document(const nlohmann::json& fit, const std::string& where);

// The same for a whole calibration file: a string "name", an integer "version", and its
// "fit" as above (rule "calibration_schema" for the file's own fields).
void check_calibration_document(const nlohmann::json& document, const std::string& where);

// The content hash of a fit result (rungcal-fit JSON) with its config text.
std::string calibration_content_sha256(const nlohmann::json& fit, const std::string& config_text);

// An absolute magnitude from a calibration with its uncertainties.
struct Prediction {
  double abs_mag = 0;        // M(log P, [Fe/H])
  double calibration_error = 0;  // from the parameters' covariance: common to all stars
  double intrinsic_scatter = 0;  // the relation's sigma_int: a single star's scatter about it
  std::vector<double> gradient;  // dM / d(parameter), in the relation's parameter order
};

// sqrt(g^T C g) for a relation's covariance C: the calibration error of any linear
// combination of predictions (a host's weighted mean uses the mean gradient).
double calibration_error_of(const Calibration& calibration, const std::string& relation, const std::vector<double>& gradient);

// M = alpha + beta (log P - log P0) [+ beta_long (log P - log Pb) above log Pb]
// [+ gamma [Fe/H]]; calibration error sqrt(g^T C g), g the gradient in the parameters.
// Throws InputError ("unknown_relation", "missing_value") when the relation is not in the
// calibration or a metallicity term needs [Fe/H].
Prediction predict_absolute_magnitude(const Calibration& calibration, const std::string& relation, double log_period,
                                      std::optional<double> feh = std::nullopt);

}  // namespace rungcal
