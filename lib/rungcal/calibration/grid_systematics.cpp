// SPDX-License-Identifier: MIT
#include "rungcal/calibration/grid_systematics.hpp"

#include <algorithm>
#include <cmath>
#include <map>
#include <optional>
#include <utility>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/json_io.hpp"
#include "rungcal/table/error_budget_schema.hpp"

namespace rungcal {

std::vector<double> SystematicShifts::modulus_shifts(const std::vector<double>& gradient) const {
  std::vector<double> out;
  out.reserve(shift.size());
  for (const auto& s : shift) {
    double d = 0;
    for (std::size_t j = 0; j < s.size() && j < gradient.size(); ++j) d -= gradient[j] * s[j];
    out.push_back(d);
  }
  return out;
}

SystematicShifts SystematicShifts::without_categories(const std::vector<std::string>& skip,
                                                      const std::string& option) const {
  for (const auto& c : skip)
    if (std::find(categories.begin(), categories.end(), c) == categories.end())
      throw InputError({source, {}, option, "row", "key"}, "unknown_category",
                       fmt::format("the error budget has no category '{}'", c));
  SystematicShifts out;
  out.source = source;
  for (std::size_t v = 0; v < variants.size(); ++v) {
    if (std::find(skip.begin(), skip.end(), categories[v]) != skip.end()) continue;
    out.variants.push_back(variants[v]);
    out.categories.push_back(categories[v]);
    out.changes_extinction.push_back(changes_extinction[v]);
    out.shift.push_back(shift[v]);
  }
  return out;
}

SystematicShifts systematic_shifts(const nlohmann::json& budget, const std::string& where,
                                   const Calibration& cal, const std::string& relation) {
  require_error_budget_schema(budget, where);
  SystematicShifts s;
  s.source = where;
  const nlohmann::json& variants = budget_array_at(budget, budget_key::kVariants, "", where);
  std::map<std::string, std::size_t> index;
  for (std::size_t k = 0; k < variants.size(); ++k) {
    const std::string at = fmt::format("variants[{}].", k);
    if (!variants[k].is_object())
      budget_schema_error(where, at.substr(0, at.size() - 1), "must be an object");
    s.variants.push_back(budget_string_at(variants[k], budget_key::kName, at, where));
    s.categories.push_back(budget_string_at(variants[k], budget_key::kCategory, at, where));
    const auto ext = variants[k].find(budget_key::kChangesExtinction);
    if (ext != variants[k].end() && !ext->is_boolean())
      budget_schema_error(where, at + budget_key::kChangesExtinction, "must be true or false");
    s.changes_extinction.push_back(ext != variants[k].end() && ext->get<bool>());
    index[s.variants.back()] = k;
  }
  const nlohmann::json& relations = budget_array_at(budget, budget_key::kRelations, "", where);
  const nlohmann::json* rel = nullptr;
  std::string rel_at;
  for (std::size_t i = 0; i < relations.size(); ++i) {
    const std::string at = fmt::format("relations[{}].", i);
    if (!relations[i].is_object())
      budget_schema_error(where, at.substr(0, at.size() - 1), "must be an object");
    if (budget_string_at(relations[i], budget_key::kName, at, where) == relation)
      rel = &relations[i], rel_at = at;
  }
  if (!rel)
    throw InputError({where, {}, budget_key::kRelations, "row", "key"}, "unknown_relation",
                     fmt::format("the error budget has no relation '{}'", relation));
  const FitRelationRecord cal_relation = cal.relation_record(relation);
  const std::vector<std::string>& names = cal_relation.parameter_names;
  s.shift.assign(s.variants.size(), std::vector<double>(names.size(), 0.0));
  const nlohmann::json& params = budget_array_at(*rel, budget_key::kParameters, rel_at, where);
  std::vector<bool> variant_has_rows(s.variants.size(), false);
  std::vector<std::pair<std::size_t, double>>
      listed;  // budget parameters of the calibration: index, baseline
  for (std::size_t j = 0; j < params.size(); ++j) {
    const std::string at = fmt::format("{}parameters[{}].", rel_at, j);
    if (!params[j].is_object())
      budget_schema_error(where, at.substr(0, at.size() - 1), "must be an object");
    const std::string name = budget_string_at(params[j], budget_key::kName, at, where);
    const double baseline = budget_number_at(params[j], budget_key::kBaseline, at, where);
    std::optional<std::size_t> p;
    for (std::size_t q = 0; q < names.size(); ++q)
      if (names[q] == name) p = q;
    if (!p) continue;  // a parameter the calibration lacks moves no prediction of it
    const double value = cal_relation.parameters.at(*p).value;
    const nlohmann::json& err = params[j].contains(budget_key::kBaselineError)
                                    ? params[j][budget_key::kBaselineError]
                                    : nlohmann::json();
    const double tolerance =
        err.is_number() ? 0.1 * err.get<double>() : 1e-9 * std::max(1.0, std::abs(value));
    if (std::abs(value - baseline) > tolerance)
      spdlog::warn(
          "{}: the grid's baseline {} = {} differs from the calibration's {} by more than 0.1 of "
          "its error: the budget describes another fit, and its systematics only approximate "
          "this calibration's",
          where, name, baseline, value);
    listed.emplace_back(*p, baseline);
    std::vector<bool> seen(s.variants.size(), false);
    const nlohmann::json& rows = budget_array_at(params[j], budget_key::kVariants, at, where);
    for (std::size_t k = 0; k < rows.size(); ++k) {
      const std::string row_at = fmt::format("{}variants[{}].", at, k);
      if (!rows[k].is_object())
        budget_schema_error(where, row_at.substr(0, row_at.size() - 1), "must be an object");
      const std::string variant = budget_string_at(rows[k], budget_key::kVariant, row_at, where);
      auto v = index.find(variant);
      if (v == index.end())
        budget_schema_error(where, row_at + "variant",
                            "names no variant of the budget's \"variants\"");
      s.shift[v->second][*p] = budget_number_at(rows[k], budget_key::kShift, row_at, where);
      seen[v->second] = variant_has_rows[v->second] = true;
    }
    for (std::size_t v = 0; v < s.variants.size(); ++v)
      if (!seen[v]) s.shift[v][*p] = -baseline;  // the term is absent from that variant's model
  }
  for (std::size_t v = 0; v < s.variants.size(); ++v) {
    if (variant_has_rows[v] || listed.empty()) continue;
    // No row at all: the variant has no fit of this relation, not a model without a term.
    spdlog::warn("{}: variant '{}' has no shift for relation {}: left out of its systematic error",
                 where, s.variants[v], relation);
    for (const auto& [p, baseline] : listed) s.shift[v][p] = 0.0;
  }
  return s;
}

SystematicShifts read_systematic_shifts(const std::string& path, const Calibration& cal,
                                        const std::string& relation) {
  return systematic_shifts(read_json_file(path), path, cal, relation);
}

}  // namespace rungcal
