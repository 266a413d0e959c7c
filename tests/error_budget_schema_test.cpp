// SPDX-License-Identifier: MIT
// The error budget's schema (table/error_budget_schema.hpp): the check every reader runs, and
// the keys against docs/file-formats.md ("Systematics grid"). The budget below follows the
// format's page; its numbers are invented.
#include <gtest/gtest.h>

#include <string>

#include "rungcal/core/error.hpp"
#include "rungcal/table/error_budget_schema.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

nlohmann::json small_budget() {
  return nlohmann::json::parse(R"({
    "schema": "rungcal-error-budget", "schema_version": 1,
    "relations": [{"name": "W_VI", "parameters": [
      {"name": "alpha", "baseline": -5.91, "baseline_error": 0.02,
       "variants": [{"variant": "rv_3.3", "category": "extinction", "shift": 0.004,
                     "shift_sigma": 0.2}],
       "categories": {"extinction": 0.004}, "total": 0.004},
      {"name": "gamma", "baseline": -0.2, "baseline_error": null, "variants": [],
       "categories": {}, "total": 0.0}]}],
    "variants": [{"name": "rv_3.3", "category": "extinction", "changes_extinction": true}]})");
}

// The rule and the key path a broken budget is refused with.
std::string refusal(const nlohmann::json& doc) {
  try {
    check_error_budget_document(doc, "grid.json");
  } catch (const InputError& e) {
    return e.rule() + " " + e.where().column;
  }
  return "accepted";
}

TEST(ErrorBudgetSchema, AWellFormedBudgetPasses) { EXPECT_EQ(refusal(small_budget()), "accepted"); }

TEST(ErrorBudgetSchema, EachBrokenKeyIsNamedByItsPath) {
  auto b = small_budget();
  b["schema"] = "rungcal-fit";
  EXPECT_EQ(refusal(b), "budget_schema schema");
  b = small_budget();
  b["relations"][0]["parameters"][1].erase("total");
  EXPECT_EQ(refusal(b), "budget_schema relations[0].parameters[1].total");
  b = small_budget();
  b["relations"][0]["parameters"][0]["baseline_error"] = "0.02";
  EXPECT_EQ(refusal(b), "budget_schema relations[0].parameters[0].baseline_error");
  b = small_budget();
  b["relations"][0]["parameters"][0]["variants"][0]["shift"] = nullptr;
  EXPECT_EQ(refusal(b), "budget_schema relations[0].parameters[0].variants[0].shift");
  b = small_budget();
  b["relations"][0]["parameters"][0]["categories"]["extinction"] = -1.0;
  EXPECT_EQ(refusal(b), "budget_schema relations[0].parameters[0].categories.extinction");
  b = small_budget();
  b["relations"][0]["name"] = 3;
  EXPECT_EQ(refusal(b), "budget_schema relations[0].name");
}

TEST(ErrorBudgetSchema, EveryKeyIsDocumented) {
  const std::string page = test::doc_section("file-formats.md", "Systematics grid");
  ASSERT_FALSE(page.empty());
  using namespace budget_key;
  for (const char* key :
       {kSchema, kSchemaVersion, kProvenance, kRelations, kVariants, kName, kParameters, kVariant,
        kCategory, kChangesExtinction, kBaseline, kBaselineError, kCategories, kTotal, kShift,
        kShiftSigma, kErrorBudgetSchemaName})
    EXPECT_NE(page.find(std::string(key)), std::string::npos) << key;  // as `key` or in text
}

}  // namespace
}  // namespace rungcal
