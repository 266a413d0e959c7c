// SPDX-License-Identifier: MIT
#pragma once

#include <cmath>
#include <optional>
#include <string>

#include <nlohmann/json.hpp>

namespace rungcal {

// The calibration: the file publish writes into a store's version folder (calibration.json,
// and its FITS copy calibration.fits; calibration/store.cpp), which apply, diff, report and
// rungcal-run read (docs/file-formats.md, "Calibration file"). Its keys are named here once,
// with a typed record of its own fields; its "fit" is the fit result verbatim
// (table/fit_result_schema.hpp). It lives in `table` with the other products' schemas: the
// lowest floor its writer and every reader include. A new field: its key below, a member of
// CalibrationRecord with its to_json and calibration_from_json lines, a check in
// check_calibration_document when readers rely on it, and the file format page.

// Schema version of calibration files.
inline constexpr int kCalibrationSchemaVersion = 1;
// The value of its "schema" key.
inline constexpr char kCalibrationSchemaName[] = "rungcal-calibration";

namespace calibration_key {
// The document.
inline constexpr char kSchema[] = "schema";
inline constexpr char kSchemaVersion[] = "schema_version";
inline constexpr char kName[] = "name";
inline constexpr char kVersion[] = "version";  // also the previous version's
inline constexpr char kPublishedUtc[] = "published_utc";
inline constexpr char kContentSha256[] = "content_sha256";  // also the previous version's
inline constexpr char kConfigText[] = "config_text";
inline constexpr char kFit[] = "fit";
inline constexpr char kPrevious[] = "previous";  // null for the first version
// The previous version.
inline constexpr char kShifts[] = "shifts";  // {relation: {parameter: shift}}
// A parameter's shift from the previous version.
inline constexpr char kShift[] = "shift";
inline constexpr char kCombinedSigma[] = "combined_sigma";
inline constexpr char kShiftInSigma[] = "shift_in_sigma";
}  // namespace calibration_key

// The FITS copy: a parameter table and the JSON verbatim, each with the keywords below.
namespace calibration_fits {
inline constexpr char kParametersHdu[] = "PARAMS";
inline constexpr char kJsonHdu[] = "CALJSON";
inline constexpr char kJsonColumn[] = "json";
// PARAMS columns: relation and parameter, then the fit result's parameter keys (mode, value,
// error, bootstrap_error, p16, p50, p84).
inline constexpr char kRelationColumn[] = "relation";
inline constexpr char kParameterColumn[] = "parameter";
// Header keywords; RGCALSHA is stamped on apply's distance products too.
inline constexpr char kNameKeyword[] = "RGCALNAM";
inline constexpr char kVersionKeyword[] = "RGCALVER";
inline constexpr char kContentShaKeyword[] = "RGCALSHA";
}  // namespace calibration_fits

// A parameter's shift from the previous version: new - old, in units of the two errors in
// quadrature (NaN, written null, when they are missing or zero).
struct ParameterShiftRecord {
  double shift = 0;
  double combined_sigma = std::nan("");
  double shift_in_sigma = std::nan("");
};
nlohmann::json to_json(const ParameterShiftRecord& shift);
ParameterShiftRecord parameter_shift_from_json(const nlohmann::json& shift);

// The version a calibration was published after.
struct PreviousVersionRecord {
  int version = 0;
  std::string content_sha256;
  nlohmann::json shifts =
      nlohmann::json::object();  // {relation: {parameter: ParameterShiftRecord}}
};

// A calibration file's own fields, with its fit result as it is.
struct CalibrationRecord {
  std::string name;
  int version = 0;
  std::string published_utc;
  std::string content_sha256;
  std::string config_text;
  nlohmann::json fit;                             // the rungcal-fit result
  std::optional<PreviousVersionRecord> previous;  // none for the first version
};
// The whole document, schema and schema_version included.
nlohmann::json to_json(const CalibrationRecord& calibration);
// Reads a checked document (check_calibration_document); absent fields read as empty.
CalibrationRecord calibration_from_json(const nlohmann::json& document);

// The previous version's number, std::nullopt for a first version.
std::optional<int> previous_version(const nlohmann::json& document);

// InputError (rule "not_a_calibration", key "schema") unless `document` says it is a
// calibration file; `where` is the file.
void require_calibration_schema(const nlohmann::json& document, const std::string& where);

// Checks a calibration file's own fields: a string "name", an integer "version" and a "fit"
// (rule "calibration_schema"), then its fit as check_fit_document does (rule "fit_schema").
// `where` is the file.
void check_calibration_document(const nlohmann::json& document, const std::string& where);

}  // namespace rungcal
