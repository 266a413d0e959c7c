// SPDX-License-Identifier: MIT
#include "rungcal/table/fit_result_schema.hpp"

#include <cmath>
#include <limits>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/json_io.hpp"

namespace rungcal {
namespace {

using nlohmann::json;

json number_or_null(const std::optional<double>& v) {
  return v ? json_number_or_null(*v) : json(nullptr);
}

bool finite_number(const json& v) { return v.is_number() && std::isfinite(v.get<double>()); }

[[noreturn]] void schema_error(const std::string& where, const std::string& key,
                               const std::string& message) {
  throw InputError({where, {}, key, "row", "key"}, "fit_schema", message);
}

const json& member(const json& object, const char* key, const std::string& path,
                   const std::string& where) {
  auto it = object.find(key);
  if (it == object.end()) schema_error(where, path + key, "missing");
  return *it;
}

void require_finite(const json& object, const char* key, const std::string& path,
                    const std::string& where) {
  const json& v = member(object, key, path, where);
  if (!finite_number(v))
    schema_error(where, path + key,
                 fmt::format("must be a finite number, not {}", v.dump().substr(0, 40)));
}

void require_string(const json& object, const char* key, const std::string& path,
                    const std::string& where) {
  if (!member(object, key, path, where).is_string())
    schema_error(where, path + key, "must be a string");
}

void check_parameter(const json& p, const std::string& at, const std::string& where) {
  if (!p.is_object()) schema_error(where, at.substr(0, at.size() - 1), "must be an object");
  require_string(p, fit_key::kName, at, where);
  require_string(p, fit_key::kMode, at, where);
  require_finite(p, fit_key::kValue, at, where);
  const json& e = member(p, fit_key::kError, at, where);
  if (!e.is_null() && !finite_number(e))
    schema_error(where, at + fit_key::kError, "must be a finite number or null");
}

void check_relation(const json& r, const std::string& at, const std::string& where) {
  if (!r.is_object()) schema_error(where, at.substr(0, at.size() - 1), "must be an object");
  require_string(r, fit_key::kName, at, where);
  require_finite(r, fit_key::kPivotLogPeriod, at, where);
  if (r.contains(fit_key::kBreakLogPeriod)) require_finite(r, fit_key::kBreakLogPeriod, at, where);
  const json& names = member(r, fit_key::kParameterNames, at, where);
  bool strings = names.is_array();
  for (std::size_t k = 0; strings && k < names.size(); ++k) strings = names[k].is_string();
  if (!strings) schema_error(where, at + fit_key::kParameterNames, "must be an array of strings");
  const json& params = member(r, fit_key::kParameters, at, where);
  if (!params.is_array() || params.size() != names.size())
    schema_error(
        where, at + fit_key::kParameters,
        fmt::format("must be an array of {} parameters, one per parameter name", names.size()));
  for (std::size_t j = 0; j < params.size(); ++j)
    check_parameter(params[j], fmt::format("{}{}[{}].", at, fit_key::kParameters, j), where);
  const json& cov = member(r, fit_key::kCovariance, at, where);
  bool square = cov.is_array() && cov.size() == names.size();
  for (std::size_t j = 0; square && j < cov.size(); ++j) {
    square = cov[j].is_array() && cov[j].size() == names.size();
    for (std::size_t k = 0; square && k < cov[j].size(); ++k)
      square = cov[j][k].is_null() || finite_number(cov[j][k]);
  }
  if (!square)
    schema_error(where, at + fit_key::kCovariance,
                 fmt::format("must be a {0} x {0} array of finite numbers or nulls", names.size()));
  if (r.contains(fit_key::kUsed)) {
    const json& used = r.at(fit_key::kUsed);
    bool ok = used.is_array();
    for (std::size_t k = 0; ok && k < used.size(); ++k) ok = used[k].is_string();
    if (!ok) schema_error(where, at + fit_key::kUsed, "must be an array of star ids");
  }
}

}  // namespace

json to_json(const Provenance& p) {
  json out = {{fit_key::kStage, p.stage},
              {fit_key::kSoftwareVersion, p.software_version},
              {fit_key::kSoftwareCommit, p.software_commit},
              {fit_key::kCreatedUtc, p.created_utc},
              {fit_key::kConfigSha256, p.config_sha256}};
  for (const InputRecord& in : p.inputs)
    out[fit_key::kInputs].push_back(
        {{fit_key::kPath, in.path}, {fit_key::kSha256, in.sha256}, {fit_key::kRows, in.rows}});
  return out;
}

Provenance provenance_from_json(const json& p) {
  Provenance out;
  if (!p.is_object()) return out;
  out.stage = json_string_or_empty(p, fit_key::kStage);
  out.software_version = json_string_or_empty(p, fit_key::kSoftwareVersion);
  out.software_commit = json_string_or_empty(p, fit_key::kSoftwareCommit);
  out.created_utc = json_string_or_empty(p, fit_key::kCreatedUtc);
  out.config_sha256 = json_string_or_empty(p, fit_key::kConfigSha256);
  if (auto inputs = p.find(fit_key::kInputs); inputs != p.end() && inputs->is_array())
    for (const json& in : *inputs) {
      InputRecord r{json_string_or_empty(in, fit_key::kPath),
                    json_string_or_empty(in, fit_key::kSha256), -1};
      if (auto rows = in.find(fit_key::kRows); rows != in.end() && rows->is_number_integer())
        r.rows = rows->get<std::int64_t>();
      out.inputs.push_back(r);
    }
  return out;
}

double FitParameterRecord::error_or_nan() const {
  return error ? *error : std::numeric_limits<double>::quiet_NaN();
}

double FitParameterRecord::prior_sigma() const {
  return prior && std::isfinite(prior->sigma) ? std::max(0.0, prior->sigma) : 0.0;
}

json to_json(const FitParameterRecord& p) {
  json out = {{fit_key::kName, p.name},
              {fit_key::kValue, p.value},
              {fit_key::kError, number_or_null(p.error)},
              {fit_key::kBootstrapError, number_or_null(p.bootstrap_error)},
              {fit_key::kP16, number_or_null(p.p16)},
              {fit_key::kP50, number_or_null(p.p50)},
              {fit_key::kP84, number_or_null(p.p84)}};
  if (p.mode) out[fit_key::kMode] = std::string(kParamModeNames.name(*p.mode));
  if (p.prior)
    out[fit_key::kPrior] = {{fit_key::kPriorMean, p.prior->mean},
                            {fit_key::kPriorSigma, p.prior->sigma}};
  if (!p.determined) out[fit_key::kDetermined] = false;
  return out;
}

FitParameterRecord fit_parameter_from_json(const json& p) {
  FitParameterRecord out;
  out.name = json_string_or_empty(p, fit_key::kName);
  out.value = p.at(fit_key::kValue).get<double>();
  if (auto mode = p.find(fit_key::kMode); mode != p.end() && mode->is_string())
    out.mode = kParamModeNames.parse(mode->get<std::string>());
  out.error = json_optional_number(p, fit_key::kError);
  out.bootstrap_error = json_optional_number(p, fit_key::kBootstrapError);
  out.p16 = json_optional_number(p, fit_key::kP16);
  out.p50 = json_optional_number(p, fit_key::kP50);
  out.p84 = json_optional_number(p, fit_key::kP84);
  if (auto prior = p.find(fit_key::kPrior); prior != p.end() && prior->is_object())
    out.prior = FitPriorRecord{json_optional_number(*prior, fit_key::kPriorMean).value_or(0.0),
                               json_optional_number(*prior, fit_key::kPriorSigma).value_or(0.0)};
  if (auto determined = p.find(fit_key::kDetermined);
      determined != p.end() && determined->is_boolean())
    out.determined = determined->get<bool>();
  return out;
}

const FitParameterRecord* FitRelationRecord::find_parameter(const std::string& parameter) const {
  for (const FitParameterRecord& p : parameters)
    if (p.name == parameter) return &p;
  return nullptr;
}

json to_json(const FitRelationRecord& r) {
  json out;
  out[fit_key::kName] = r.name;
  out[fit_key::kBand] = r.band;
  out[fit_key::kPivotLogPeriod] = r.pivot_log_period;
  if (r.break_log_period) out[fit_key::kBreakLogPeriod] = *r.break_log_period;
  out[fit_key::kMetallicity] = r.metallicity;
  out[fit_key::kParameterNames] = r.parameter_names;
  for (const FitParameterRecord& p : r.parameters) out[fit_key::kParameters].push_back(to_json(p));
  json cov = json::array();
  for (const auto& row : r.covariance) {
    json cells = json::array();
    for (double v : row) cells.push_back(json_number_or_null(v));
    cov.push_back(cells);
  }
  out[fit_key::kCovariance] = cov;
  out[fit_key::kUsed] = r.used;
  out[fit_key::kRejected] = json::array();
  for (const RefusedStarRecord& s : r.rejected)
    out[fit_key::kRejected].push_back({{fit_key::kId, s.id}, {fit_key::kReason, s.reason}});
  return out;
}

FitRelationRecord fit_relation_from_json(const json& r) {
  FitRelationRecord out;
  out.name = r.at(fit_key::kName).get<std::string>();
  out.band = json_string_or_empty(r, fit_key::kBand);
  out.pivot_log_period = json_optional_number(r, fit_key::kPivotLogPeriod)
                             .value_or(std::numeric_limits<double>::quiet_NaN());
  out.break_log_period = json_optional_number(r, fit_key::kBreakLogPeriod);
  if (auto m = r.find(fit_key::kMetallicity); m != r.end() && m->is_boolean())
    out.metallicity = m->get<bool>();
  if (auto names = r.find(fit_key::kParameterNames); names != r.end() && names->is_array())
    out.parameter_names = names->get<std::vector<std::string>>();
  if (auto params = r.find(fit_key::kParameters); params != r.end() && params->is_array())
    for (std::size_t j = 0; j < params->size(); ++j) {
      FitParameterRecord p = fit_parameter_from_json((*params)[j]);
      if (p.name.empty() && j < out.parameter_names.size()) p.name = out.parameter_names[j];
      out.parameters.push_back(std::move(p));
    }
  if (!r.contains(fit_key::kParameterNames))
    for (const FitParameterRecord& p : out.parameters) out.parameter_names.push_back(p.name);
  if (auto cov = r.find(fit_key::kCovariance); cov != r.end() && cov->is_array())
    for (const json& row : *cov) {
      std::vector<double> cells;
      for (const json& v : row)
        cells.push_back(v.is_number() ? v.get<double>() : std::numeric_limits<double>::quiet_NaN());
      out.covariance.push_back(std::move(cells));
    }
  if (auto used = r.find(fit_key::kUsed); used != r.end() && used->is_array())
    out.used = used->get<std::vector<std::string>>();
  if (auto rejected = r.find(fit_key::kRejected); rejected != r.end() && rejected->is_array())
    for (const json& s : *rejected)
      out.rejected.push_back(
          {json_string_or_empty(s, fit_key::kId), json_string_or_empty(s, fit_key::kReason)});
  if (auto stats = r.find(fit_key::kStatistics); stats != r.end() && stats->is_object())
    if (auto n = stats->find(fit_key::kNUsed); n != stats->end() && n->is_number_integer())
      out.n_used = n->get<int>();
  return out;
}

std::vector<FitRelationRecord> fit_relations(const json& fit) {
  std::vector<FitRelationRecord> out;
  for (const json& r : fit.at(fit_key::kRelations)) out.push_back(fit_relation_from_json(r));
  return out;
}

void check_fit_document(const json& fit, const std::string& where) {
  if (!fit.is_object()) schema_error(where, "", "the fit result must be a JSON object");
  const json& relations = member(fit, fit_key::kRelations, "", where);
  if (!relations.is_array())
    schema_error(where, fit_key::kRelations, "must be an array of relations");
  for (std::size_t i = 0; i < relations.size(); ++i)
    check_relation(relations[i], fmt::format("{}[{}].", fit_key::kRelations, i), where);
}

}  // namespace rungcal
