// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <nlohmann/json.hpp>

#include "rungcal/table/calibration_schema.hpp"
#include "rungcal/table/fit_result_schema.hpp"

namespace rungcal {

// A published calibration file: {schema, schema_version, name, version, published_utc,
// content_sha256, previous {version, content_sha256, shifts}, config_text, fit}, where fit
// is the rungcal-fit result it was made from (parameters, covariance, statistics, rejected
// stars, provenance and model). Its keys and schema version (kCalibrationSchemaVersion),
// its record and check_calibration_document: table/calibration_schema.hpp.
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
  // The relation's typed record (table/fit_result_schema.hpp), or InputError
  // ("unknown_relation"); find_relation_record: std::nullopt when there is none.
  FitRelationRecord relation_record(const std::string& name) const;
  std::optional<FitRelationRecord> find_relation_record(const std::string& name) const;
  // The fit result inside: the fit's "provenance" and "relations".
  const nlohmann::json& fit() const;
};

// check_fit_document, which checks a rungcal-fit result (fit.json, or a calibration's
// "fit"): table/fit_result_schema.hpp.

// The content hash of a fit result (rungcal-fit JSON) with its config text.
std::string calibration_content_sha256(const nlohmann::json& fit, const std::string& config_text);

// An absolute magnitude from a calibration with its uncertainties.
struct Prediction {
  double abs_mag = 0;            // M(log P, [Fe/H])
  double calibration_error = 0;  // from the parameters' covariance: common to all stars
  double intrinsic_scatter = 0;  // the relation's sigma_int: a single star's scatter about it
  std::vector<double> gradient;  // dM / d(parameter), in the relation's parameter order
};

// The covariance C of a relation's parameters (parameter_names order) that predictions
// propagate, with every prior in it:
// - an entry the fit gives is its covariance at the optimum (the Hessian of -ln L, or the
//   least-squares covariance); every Gaussian prior of the fit (an anchor's geometric
//   distance, a prior on the offset, slope or metallicity term) is a term of -ln L, so its
//   curvature is in C already;
// - a parameter with a prior whose variance the fit left null (undetermined, or no
//   covariance at all) takes the prior's sigma^2, uncorrelated: the prior alone bounds it,
//   and the data can only narrow it;
// - a fixed parameter has variance 0, and a null off-diagonal entry counts as 0;
// - a free parameter whose variance is null stays NaN: the calibration gives no error for
//   it, and a prediction that needs it is refused (calibration_error_of).
struct ParameterCovariance {
  std::vector<std::string> names;  // the relation's parameter_names
  Eigen::MatrixXd matrix;          // C (mag and the parameters' units)
  std::vector<bool> from_prior;    // the variance is the prior's sigma^2

  // g^T C h; InputError (rule "undetermined_parameter", naming `label` and the parameter)
  // when a parameter with a non-zero entry in g or h has no variance.
  double form(const std::vector<double>& g, const std::vector<double>& h,
              const std::string& label) const;
};
ParameterCovariance parameter_covariance(const Calibration& calibration,
                                         const std::string& relation);

// sqrt(g^T C g) for a relation's covariance C (parameter_covariance): the calibration error
// of any linear combination of predictions (a host's weighted mean uses the mean gradient).
double calibration_error_of(const Calibration& calibration, const std::string& relation,
                            const std::vector<double>& gradient);

// M = alpha + beta (log P - log P0) [+ beta_long (log P - log Pb) above log Pb]
// [+ gamma [Fe/H]]; calibration error sqrt(g^T C g), g the gradient in the parameters and
// C from parameter_covariance.
// Throws InputError ("unknown_relation", "missing_value") when the relation is not in the
// calibration or a metallicity term needs [Fe/H].
Prediction predict_absolute_magnitude(const Calibration& calibration, const std::string& relation,
                                      double log_period, std::optional<double> feh = std::nullopt);

}  // namespace rungcal
