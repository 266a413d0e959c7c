// SPDX-License-Identifier: MIT
#pragma once

#include <string>

#include <nlohmann/json.hpp>

namespace rungcal {

// The systematic error budget: grid.json, which rungcal-grid writes (grid/grid.cpp); apply
// reads a relation's shifts from it (calibration/grid_systematics.cpp) and the report
// tabulates it (report/tables.cpp). Its keys are named here once, with the one check every
// reader runs first (docs/file-formats.md, "Systematics grid"). It lives in `table` because
// that is the lowest floor the writer and both readers include.

// The value of its "schema" key.
inline constexpr char kErrorBudgetSchemaName[] = "rungcal-error-budget";

namespace budget_key {
// The document.
inline constexpr char kSchema[] = "schema";
inline constexpr char kSchemaVersion[] = "schema_version";
inline constexpr char kProvenance[] = "provenance";
inline constexpr char kRelations[] = "relations";
inline constexpr char kVariants[] = "variants";  // also a parameter's rows, below
// A relation, and a document-level variant.
inline constexpr char kName[] = "name";
inline constexpr char kParameters[] = "parameters";
inline constexpr char kCategory[] = "category";
inline constexpr char kChangesExtinction[] = "changes_extinction";
// A parameter.
inline constexpr char kBaseline[] = "baseline";
inline constexpr char kBaselineError[] = "baseline_error";  // null when undetermined
inline constexpr char kCategories[] = "categories";         // category -> quadrature sum of shifts
inline constexpr char kTotal[] = "total";
// A parameter's row per variant.
inline constexpr char kVariant[] = "variant";
inline constexpr char kShift[] = "shift";
inline constexpr char kShiftSigma[] = "shift_sigma";  // null when the baseline has no error
}  // namespace budget_key

// Refuses a budget with InputError (rule `budget_schema`) naming key path `key` in `where`.
[[noreturn]] void budget_schema_error(const std::string& where, const std::string& key,
                                      const std::string& message);

// Refuses `doc` unless it is an object whose schema is kErrorBudgetSchemaName.
void require_error_budget_schema(const nlohmann::json& doc, const std::string& where);

// Members of a budget object that must be there, with the type the format gives them;
// otherwise InputError (rule `budget_schema`) naming `path + key` in file `where`.
const nlohmann::json& budget_array_at(const nlohmann::json& object, const std::string& key,
                                      const std::string& path, const std::string& where);
std::string budget_string_at(const nlohmann::json& object, const std::string& key,
                             const std::string& path, const std::string& where);
double budget_number_at(const nlohmann::json& object, const std::string& key,
                        const std::string& path, const std::string& where);

// Checks that `doc` (read from `where`) is an error budget with every member its readers use,
// of the right type: the schema name, then each relation's name and parameters, each
// parameter's baseline, baseline_error (a number or null), variants rows, categories and
// total. The first broken rule throws InputError (rule `budget_schema`) naming its key path,
// e.g. relations[0].parameters[1].total.
void check_error_budget_document(const nlohmann::json& doc, const std::string& where);

}  // namespace rungcal
