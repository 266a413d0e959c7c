// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "rungcal/core/enum_table.hpp"
#include "rungcal/core/provenance.hpp"

namespace rungcal {

// The fit result: the JSON rungcal-fit writes (plfit/fit_result_json.cpp) and publish copies
// into a calibration's "fit"; calibration, report and grid read it (docs/file-formats.md,
// "Fit result"). Its keys are named here once, and the parts other stages read have typed
// records with a writer and a reader, so the two ends cannot drift apart. It lives in
// `table` because that is the lowest floor the writer (plfit) and every reader can include.
// A new field: a key below, a member of its record with its to_json and from_json lines,
// and docs/file-formats.md.

// Schema version of the fit result.
inline constexpr int kFitSchemaVersion = 1;
// The value of its "schema" key.
inline constexpr char kFitSchemaName[] = "rungcal-fit";

// How a parameter enters a fit: free, held at a value, or free with a Gaussian prior.
enum class ParamMode { kFree, kFixed, kPrior };
inline constexpr EnumTable<ParamMode, 3> kParamModeNames{{{
    {ParamMode::kFree, "free"},
    {ParamMode::kFixed, "fixed"},
    {ParamMode::kPrior, "prior"},
}}};

// How a calibrator's distance enters the fit (the residual table's `kind` column).
enum class CalibratorKind {
  kNone,           // not used before its kind was known (refused early)
  kParallax,       // its own parallax
  kKnownDistance,  // a given distance modulus (mu_mag)
  kAnchor,         // a member of an [[anchor]] galaxy
  kCluster,        // a member of a [[cluster]]
};
inline constexpr EnumTable<CalibratorKind, 5> kCalibratorKindNames{{{
    {CalibratorKind::kNone, ""},
    {CalibratorKind::kParallax, "parallax"},
    {CalibratorKind::kKnownDistance, "known_distance"},
    {CalibratorKind::kAnchor, "anchor"},
    {CalibratorKind::kCluster, "cluster"},
}}};

// The keys of the fit result, by the object they belong to.
namespace fit_key {
// The document.
inline constexpr char kSchema[] = "schema";
inline constexpr char kSchemaVersion[] = "schema_version";
inline constexpr char kProvenance[] = "provenance";
inline constexpr char kModel[] = "model";
inline constexpr char kRelations[] = "relations";
inline constexpr char kJoint[] = "joint";
// The provenance and its inputs.
inline constexpr char kStage[] = "stage";
inline constexpr char kSoftwareVersion[] = "software_version";
inline constexpr char kSoftwareCommit[] = "software_commit";
inline constexpr char kCreatedUtc[] = "created_utc";
inline constexpr char kConfigSha256[] = "config_sha256";
inline constexpr char kInputs[] = "inputs";
inline constexpr char kPath[] = "path";
inline constexpr char kSha256[] = "sha256";
inline constexpr char kRows[] = "rows";
// A relation (the joint fit uses the same names for what it shares with one).
inline constexpr char kName[] = "name";
inline constexpr char kBand[] = "band";
inline constexpr char kPivotLogPeriod[] = "pivot_log_period";
inline constexpr char kBreakLogPeriod[] = "break_log_period";
inline constexpr char kMetallicity[] = "metallicity";
inline constexpr char kSelection[] = "selection";
inline constexpr char kParameterNames[] = "parameter_names";
inline constexpr char kParameters[] = "parameters";
inline constexpr char kCovariance[] = "covariance";
inline constexpr char kCovarianceMethod[] = "covariance_method";
inline constexpr char kCorrelation[] = "correlation";
inline constexpr char kStatistics[] = "statistics";
inline constexpr char kSolver[] = "solver";
inline constexpr char kRejected[] = "rejected";
inline constexpr char kUsed[] = "used";
inline constexpr char kClusters[] = "clusters";
inline constexpr char kWarnings[] = "warnings";
inline constexpr char kUndetermined[] = "undetermined";
inline constexpr char kDistancePriorGrid[] = "distance_prior_grid";
// A refused star.
inline constexpr char kId[] = "id";
inline constexpr char kReason[] = "reason";
// A parameter.
inline constexpr char kValue[] = "value";
inline constexpr char kMode[] = "mode";
inline constexpr char kError[] = "error";
inline constexpr char kBootstrapError[] = "bootstrap_error";
inline constexpr char kP16[] = "p16";
inline constexpr char kP50[] = "p50";
inline constexpr char kP84[] = "p84";
inline constexpr char kPrior[] = "prior";
inline constexpr char kPriorMean[] = "mean";
inline constexpr char kPriorSigma[] = "sigma";
inline constexpr char kDetermined[] = "determined";
// A relation's statistics.
inline constexpr char kNUsed[] = "n_used";
}  // namespace fit_key

// The provenance block: what made the result. Written and read by these two.
nlohmann::json to_json(const Provenance& provenance);
// Missing keys read as empty (a calibration made by a hand-written fit may lack them).
Provenance provenance_from_json(const nlohmann::json& provenance);

// A Gaussian prior on a parameter.
struct FitPriorRecord {
  double mean = 0;
  double sigma = 0;
};

// One fitted parameter, of a relation or of the joint fit (the GLS joint fit records no mode
// or prior).
struct FitParameterRecord {
  std::string name;
  double value = 0;
  std::optional<ParamMode> mode;          // none in the GLS joint fit's parameters
  std::optional<double> error;            // null: no covariance error (undetermined, boundary)
  std::optional<double> bootstrap_error;  // null or absent without a bootstrap
  std::optional<double> p16, p50, p84;    // the bootstrap's percentiles, likewise
  std::optional<FitPriorRecord> prior;    // the prior of a parameter in mode "prior"
  bool determined = true;                 // "determined": false is written only when false

  bool fixed() const { return mode == ParamMode::kFixed; }
  // The covariance error, NaN when null.
  double error_or_nan() const;
  // The prior's sigma, 0 when none.
  double prior_sigma() const;
};
nlohmann::json to_json(const FitParameterRecord& parameter);
// Reads a parameter of a checked document (check_fit_document): an absent or unknown mode
// stays unset (not fixed), an absent or non-numeric error or percentile reads as null.
FitParameterRecord fit_parameter_from_json(const nlohmann::json& parameter);

// A refused star of a relation, with the reason.
struct RefusedStarRecord {
  std::string id;
  std::string reason;
};

// The parts of a relation that other stages read. The writer adds the rest (selection,
// statistics, solver, ...) under the keys above.
struct FitRelationRecord {
  std::string name;
  std::string band;
  double pivot_log_period = 0;
  std::optional<double> break_log_period;
  bool metallicity = false;
  std::vector<std::string> parameter_names;
  std::vector<FitParameterRecord> parameters;   // in parameter_names order
  std::vector<std::vector<double>> covariance;  // parameter_names order; NaN where null
  std::vector<std::string> used;                // ids of the stars used
  std::vector<RefusedStarRecord> rejected;      // stars refused, with the reason
  std::optional<int> n_used;                    // statistics.n_used

  // The parameter of this name, or nullptr.
  const FitParameterRecord* find_parameter(const std::string& parameter) const;
};
// Writes name, band, pivot_log_period, break_log_period (when set), metallicity,
// parameter_names, parameters, covariance, used and rejected.
nlohmann::json to_json(const FitRelationRecord& relation);
// Reads a relation of a checked document. A parameter without a name takes its
// parameter_names entry, and parameter_names absent is the parameters' names; absent lists
// read as empty, an absent pivot as NaN.
FitRelationRecord fit_relation_from_json(const nlohmann::json& relation);

// The relations of a fit result (rungcal-fit JSON, or a calibration's "fit"), checked.
std::vector<FitRelationRecord> fit_relations(const nlohmann::json& fit);

// Checks the parts of a fit result that publish, diff, apply and report read: "relations"
// an array of objects, each with a string "name", finite numbers "pivot_log_period" (and
// "break_log_period" when present), "parameter_names" strings, "parameters" objects with a
// string "name" and "mode", a finite "value" and an "error" that is a finite number or
// null, and "covariance" a square array of arrays of numbers or nulls, one row per
// parameter; "used" (when present) strings. Throws InputError (rule "fit_schema") naming
// the first part that is missing or of the wrong type, with `where` as the file.
void check_fit_document(const nlohmann::json& fit, const std::string& where);

}  // namespace rungcal
