// SPDX-License-Identifier: MIT
#include "rungcal/table/calibration_schema.hpp"

#include "rungcal/core/error.hpp"
#include "rungcal/core/json_io.hpp"
#include "rungcal/table/fit_result_schema.hpp"

namespace rungcal {
namespace {

using nlohmann::json;

double number_or_nan(const json& object, const char* key) {
  return json_optional_number(object, key).value_or(std::nan(""));
}

[[noreturn]] void schema_error(const std::string& where, const std::string& key,
                               const std::string& message) {
  throw InputError({where, {}, key, "row", "key"}, "calibration_schema", message);
}

}  // namespace

json to_json(const ParameterShiftRecord& s) {
  return {{calibration_key::kShift, s.shift},
          {calibration_key::kCombinedSigma, json_number_or_null(s.combined_sigma)},
          {calibration_key::kShiftInSigma, json_number_or_null(s.shift_in_sigma)}};
}

ParameterShiftRecord parameter_shift_from_json(const json& s) {
  return {number_or_nan(s, calibration_key::kShift),
          number_or_nan(s, calibration_key::kCombinedSigma),
          number_or_nan(s, calibration_key::kShiftInSigma)};
}

json to_json(const CalibrationRecord& c) {
  json out = {{calibration_key::kSchema, kCalibrationSchemaName},
              {calibration_key::kSchemaVersion, kCalibrationSchemaVersion},
              {calibration_key::kName, c.name},
              {calibration_key::kVersion, c.version},
              {calibration_key::kPublishedUtc, c.published_utc},
              {calibration_key::kContentSha256, c.content_sha256},
              {calibration_key::kConfigText, c.config_text},
              {calibration_key::kFit, c.fit}};
  out[calibration_key::kPrevious] =
      c.previous ? json{{calibration_key::kVersion, c.previous->version},
                        {calibration_key::kContentSha256, c.previous->content_sha256},
                        {calibration_key::kShifts, c.previous->shifts}}
                 : json(nullptr);
  return out;
}

CalibrationRecord calibration_from_json(const json& d) {
  CalibrationRecord c;
  c.name = json_string_or_empty(d, calibration_key::kName);
  c.version = d.value(calibration_key::kVersion, 0);
  c.published_utc = json_string_or_empty(d, calibration_key::kPublishedUtc);
  c.content_sha256 = json_string_or_empty(d, calibration_key::kContentSha256);
  c.config_text = json_string_or_empty(d, calibration_key::kConfigText);
  c.fit = d.value(calibration_key::kFit, json());
  if (const std::optional<int> v = previous_version(d)) {
    const json& p = d.at(calibration_key::kPrevious);
    c.previous = PreviousVersionRecord{*v, json_string_or_empty(p, calibration_key::kContentSha256),
                                       p.value(calibration_key::kShifts, json::object())};
  }
  return c;
}

std::optional<int> previous_version(const json& d) {
  auto p = d.find(calibration_key::kPrevious);
  if (p == d.end() || !p->is_object()) return std::nullopt;
  auto v = p->find(calibration_key::kVersion);
  if (v == p->end() || !v->is_number_integer()) return std::nullopt;
  return v->get<int>();
}

void require_calibration_schema(const json& d, const std::string& where) {
  if (!(d.is_object() && d.contains(calibration_key::kSchema) &&
        d.at(calibration_key::kSchema) == kCalibrationSchemaName))
    throw InputError({where, {}, calibration_key::kSchema}, "not_a_calibration",
                     "not a rungcal calibration file");
}

void check_calibration_document(const json& d, const std::string& where) {
  if (!d.is_object()) schema_error(where, "", "a calibration file is a JSON object");
  auto name = d.find(calibration_key::kName);
  if (name == d.end() || !name->is_string())
    schema_error(where, calibration_key::kName, "missing, or not a string");
  auto version = d.find(calibration_key::kVersion);
  if (version == d.end() || !version->is_number_integer())
    schema_error(where, calibration_key::kVersion, "missing, or not an integer");
  auto fit = d.find(calibration_key::kFit);
  if (fit == d.end()) schema_error(where, calibration_key::kFit, "missing");
  check_fit_document(*fit, where);
}

}  // namespace rungcal
