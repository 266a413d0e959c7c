// SPDX-License-Identifier: MIT
#include "rungcal/table/error_budget_schema.hpp"

#include <cmath>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

bool finite_number(const nlohmann::json& j) {
  return j.is_number() && std::isfinite(j.get<double>());
}

// A member that is a finite number or null (an error the fit could not give).
void check_number_or_null(const nlohmann::json& object, const char* key, const std::string& path,
                          const std::string& where) {
  auto it = object.find(key);
  if (it == object.end() || !(it->is_null() || finite_number(*it)))
    budget_schema_error(where, path + key, "missing, or neither a finite number nor null");
}

void check_parameter(const nlohmann::json& p, const std::string& at, const std::string& where) {
  using namespace budget_key;
  if (!p.is_object()) budget_schema_error(where, at, "not an object");
  budget_string_at(p, kName, at, where);
  budget_number_at(p, kBaseline, at, where);
  check_number_or_null(p, kBaselineError, at, where);
  const nlohmann::json& rows = budget_array_at(p, kVariants, at, where);
  for (std::size_t k = 0; k < rows.size(); ++k) {
    const std::string row_at = fmt::format("{}{}[{}].", at, kVariants, k);
    if (!rows[k].is_object()) budget_schema_error(where, row_at, "not an object");
    budget_string_at(rows[k], kVariant, row_at, where);
    budget_string_at(rows[k], kCategory, row_at, where);
    budget_number_at(rows[k], kShift, row_at, where);
    check_number_or_null(rows[k], kShiftSigma, row_at, where);
  }
  auto cats = p.find(kCategories);
  if (cats == p.end() || !cats->is_object())
    budget_schema_error(where, at + kCategories, "missing, or not an object");
  for (const auto& [name, q] : cats->items())
    if (!finite_number(q) || q.get<double>() < 0)
      budget_schema_error(where, fmt::format("{}{}.{}", at, kCategories, name),
                          "not a finite, non-negative number");
  budget_number_at(p, kTotal, at, where);
}

}  // namespace

void budget_schema_error(const std::string& where, const std::string& key,
                         const std::string& message) {
  throw InputError({where, {}, key, "row", "key"}, "budget_schema", message);
}

void require_error_budget_schema(const nlohmann::json& doc, const std::string& where) {
  if (!doc.is_object() || doc.value(budget_key::kSchema, "") != kErrorBudgetSchemaName)
    budget_schema_error(
        where, budget_key::kSchema,
        fmt::format("not a rungcal error budget (schema \"{}\", rungcal-grid's grid.json)",
                    kErrorBudgetSchemaName));
}

const nlohmann::json& budget_array_at(const nlohmann::json& object, const std::string& key,
                                      const std::string& path, const std::string& where) {
  auto it = object.find(key);
  if (it == object.end() || !it->is_array())
    budget_schema_error(where, path + key, "missing, or not an array");
  return *it;
}

std::string budget_string_at(const nlohmann::json& object, const std::string& key,
                             const std::string& path, const std::string& where) {
  auto it = object.find(key);
  if (it == object.end() || !it->is_string())
    budget_schema_error(where, path + key, "missing, or not a string");
  return it->get<std::string>();
}

double budget_number_at(const nlohmann::json& object, const std::string& key,
                        const std::string& path, const std::string& where) {
  auto it = object.find(key);
  if (it == object.end() || !finite_number(*it))
    budget_schema_error(where, path + key, "missing, or not a finite number");
  return it->get<double>();
}

void check_error_budget_document(const nlohmann::json& doc, const std::string& where) {
  using namespace budget_key;
  require_error_budget_schema(doc, where);
  const nlohmann::json& relations = budget_array_at(doc, kRelations, "", where);
  for (std::size_t i = 0; i < relations.size(); ++i) {
    const std::string at = fmt::format("{}[{}].", kRelations, i);
    if (!relations[i].is_object()) budget_schema_error(where, at, "not an object");
    budget_string_at(relations[i], kName, at, where);
    const nlohmann::json& params = budget_array_at(relations[i], kParameters, at, where);
    for (std::size_t j = 0; j < params.size(); ++j)
      check_parameter(params[j], fmt::format("{}{}[{}].", at, kParameters, j), where);
  }
}

}  // namespace rungcal
