// SPDX-License-Identifier: MIT
#include "rungcal/simulate/study_pool.hpp"

#include <cmath>
#include <limits>
#include <map>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/json_io.hpp"

namespace rungcal {
namespace {

// Keys of a written run that are its summary, not its header.
bool is_summary_key(const std::string& key) {
  return key == "mocks" || key == "failed" || key == "failures" || key == "parameters" ||
         key == "per_mock";
}

[[noreturn]] void refuse(const std::string& path, const std::string& key, const std::string& rule,
                         const std::string& message) {
  throw InputError({path, std::nullopt, key, "row", "key"}, rule, message);
}

// An option a run's binary did not have yet is absent from its setup; it ran as that option
// unset ("", an empty list, written "[]", or false: "the fit's default"), so absent and unset
// compare equal.
bool unset(const nlohmann::json& v) {
  if (v.is_string()) return v.get<std::string>().empty() || v.get<std::string>() == "[]";
  return v.is_null() || (v.is_array() && v.empty()) || (v.is_boolean() && !v.get<bool>());
}

// The first setting whose value differs between two runs' setups ("" when none does).
std::string first_setup_difference(const nlohmann::json& a, const nlohmann::json& b) {
  if (!a.is_object() || !b.is_object()) return a == b ? "" : "setup";
  for (const auto& [key, value] : a.items()) {
    const auto at = b.find(key);
    if (at == b.end() ? !unset(value) : *at != value) return "setup." + key;
  }
  for (const auto& [key, value] : b.items())
    if (!a.contains(key) && !unset(value)) return "setup." + key;
  return "";
}

// Where the other run's header differs at `key` ("" when it does not): the key itself, or for
// the setup the setting within it.
std::string header_difference(const std::string& key, const nlohmann::json& value,
                              const nlohmann::json& other) {
  const auto at = other.find(key);
  if (at == other.end()) return key;
  if (key == "setup") return first_setup_difference(value, *at);
  return *at == value ? "" : key;
}

std::vector<double> read_numbers(const nlohmann::json& a, std::size_t expected,
                                 const std::string& path, const std::string& key) {
  if (!a.is_array() || a.size() != expected)
    refuse(path, key, "study_format",
           fmt::format("expected {} values, one per parameter", expected));
  std::vector<double> v;
  for (const auto& x : a)
    v.push_back(x.is_number() ? x.get<double>() : std::numeric_limits<double>::quiet_NaN());
  return v;
}

StudyMock read_mock(const nlohmann::json& m, std::size_t parameters, const std::string& path,
                    std::size_t index) {
  const std::string at = fmt::format("per_mock[{}]", index);
  if (!m.is_object() || !m.contains("seed") || !m["seed"].is_number_unsigned() ||
      !m.contains("ok") || !m["ok"].is_boolean())
    refuse(path, at, "study_format", "each mock needs an unsigned seed and a boolean ok");
  StudyMock d;
  d.seed = m["seed"].get<std::uint64_t>();
  d.ok = m["ok"].get<bool>();
  d.failure = json_string_or_empty(m, "failure");
  // A failed mock may have no figures; it counts only among the failures.
  const std::size_t n = d.ok ? parameters : m.value("estimate", nlohmann::json::array()).size();
  auto numbers = [&](const char* key) {
    return read_numbers(m.value(key, nlohmann::json::array()), n, path, at + "." + key);
  };
  d.estimate = numbers("estimate");
  d.error = numbers("error");
  d.bootstrap_error = numbers("bootstrap_error");
  d.bootstrap_sd = m.contains("bootstrap_sd")
                       ? numbers("bootstrap_sd")
                       : std::vector<double>(n, std::numeric_limits<double>::quiet_NaN());
  if (m.contains("mixture")) {
    if (!m["mixture"].is_object())
      refuse(path, at + ".mixture", "study_format", "the mixture shape is an object of numbers");
    for (const auto& [name, value] : m["mixture"].items()) {
      if (!value.is_number())
        refuse(path, fmt::format("{}.mixture.{}", at, name), "study_format", "must be a number");
      d.mixture[name] = value.get<double>();
    }
  }
  return d;
}

}  // namespace

StudyResult read_study_run(const std::string& path) {
  const nlohmann::json j = read_json_file(path);
  if (!j.is_object() || !j.contains("per_mock"))
    refuse(path, "per_mock", "study_no_per_mock",
           "the run has no per-mock figures (written by an older rungcal-study): rerun it");
  if (!j["per_mock"].is_array() || !j.contains("parameter_names") ||
      !j["parameter_names"].is_array() || !j.contains("truth") || !j["truth"].is_object())
    refuse(path, "per_mock", "study_format",
           "a study run needs per_mock (array), parameter_names (array) and truth (object)");
  // The summary reads each name's truth as a number, or none.
  auto usable_name = [&](const nlohmann::json& name) {
    if (!name.is_string()) return false;
    const auto at = j["truth"].find(name.get<std::string>());
    return at == j["truth"].end() || at->is_number();
  };
  for (const auto& name : j["parameter_names"])
    if (!usable_name(name))
      refuse(path, "parameter_names", "study_format",
             "each parameter name must be a string, and its truth, if given, a number");
  nlohmann::json header = nlohmann::json::object();
  for (const auto& [key, value] : j.items())
    if (!is_summary_key(key)) header[key] = value;
  const std::size_t parameters = header["parameter_names"].size();
  std::vector<StudyMock> mocks;
  for (std::size_t k = 0; k < j["per_mock"].size(); ++k)
    mocks.push_back(read_mock(j["per_mock"][k], parameters, path, k));
  return summarise_study(std::move(header), std::move(mocks));
}

StudyResult combine_studies(const std::vector<std::string>& paths) {
  if (paths.empty()) throw InputError({}, "study_format", "no study runs to combine");
  nlohmann::json header;
  std::vector<StudyMock> mocks;
  std::map<std::uint64_t, std::string> seen;  // seed -> the run it came from
  for (const std::string& path : paths) {
    StudyResult run = read_study_run(path);
    if (header.is_null()) header = run.header;
    for (const auto& [key, value] : header.items()) {
      if (const std::string at = header_difference(key, value, run.header); !at.empty())
        refuse(path, at, "study_setup_differs",
               fmt::format("differs from {}: only runs of one setup can be pooled", paths.front()));
    }
    for (const auto& [key, value] : run.header.items())
      if (!header.contains(key))
        refuse(path, key, "study_setup_differs",
               fmt::format("not in {}: only runs of one setup can be pooled", paths.front()));
    for (StudyMock& d : run.per_mock) {
      if (auto [it, fresh] = seen.emplace(d.seed, path); !fresh)
        refuse(
            path, "per_mock", "study_seed_repeated",
            fmt::format("seed {} is also in {}: its mock would count twice", d.seed, it->second));
      mocks.push_back(std::move(d));
    }
  }
  return summarise_study(std::move(header), std::move(mocks));
}

}  // namespace rungcal
