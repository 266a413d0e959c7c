// SPDX-License-Identifier: MIT
// The fit result's schema (table/fit_result_schema.hpp): what its records write, what they
// read back, and what an old or broken file is told. The keys and their meaning are the
// format's own, docs/file-formats.md "Fit result"; the numbers are invented.
#include <gtest/gtest.h>

#include <cmath>

#include "rungcal/core/error.hpp"
#include "rungcal/table/fit_result_schema.hpp"

namespace rungcal {
namespace {

FitParameterRecord offset_with_prior() {
  FitParameterRecord p;
  p.name = "parallax_offset_mas";
  p.value = -0.021;
  p.mode = ParamMode::kPrior;
  p.error = 0.004;
  p.bootstrap_error = std::nan("");  // no resamples: written null
  p.prior = FitPriorRecord{-0.017, 0.01};
  return p;
}

TEST(FitResultSchema, ParameterWritesTheFormatsKeys) {
  const nlohmann::json j = to_json(offset_with_prior());
  const nlohmann::json expected = {{"name", "parallax_offset_mas"},
                                   {"value", -0.021},
                                   {"mode", "prior"},
                                   {"error", 0.004},
                                   {"bootstrap_error", nullptr},
                                   {"p16", nullptr},
                                   {"p50", nullptr},
                                   {"p84", nullptr},
                                   {"prior", {{"mean", -0.017}, {"sigma", 0.01}}}};
  EXPECT_EQ(j, expected);
}

TEST(FitResultSchema, UndeterminedParameterHasNullErrorAndSaysSo) {
  FitParameterRecord p = offset_with_prior();
  p.error.reset();
  p.determined = false;
  const nlohmann::json j = to_json(p);
  EXPECT_TRUE(j.at("error").is_null());
  EXPECT_EQ(j.at("determined"), false);
  const FitParameterRecord back = fit_parameter_from_json(j);
  EXPECT_FALSE(back.determined);
  EXPECT_TRUE(std::isnan(back.error_or_nan()));
}

TEST(FitResultSchema, RelationReadsBackWhatItWrote) {
  FitRelationRecord r;
  r.name = "W_VI";
  r.band = "W_VI";
  r.pivot_log_period = 1.0;
  r.break_log_period = 1.4;
  r.parameter_names = {"alpha", "parallax_offset_mas"};
  FitParameterRecord alpha;
  alpha.name = "alpha";
  alpha.value = -5.77;
  alpha.mode = ParamMode::kFree;
  alpha.error = 0.03;
  r.parameters = {alpha, offset_with_prior()};
  r.covariance = {{9e-4, std::nan("")}, {std::nan(""), 1.6e-5}};
  r.used = {"HPO-C0001"};
  r.rejected = {{"HPO-C0002", "ruwe above 1.4"}};
  nlohmann::json j = to_json(r);
  EXPECT_TRUE(j.at("covariance")[0][1].is_null());
  j["statistics"] = {{"n_used", 1}};
  const FitRelationRecord back = fit_relation_from_json(j);
  EXPECT_EQ(back.name, "W_VI");
  EXPECT_EQ(back.break_log_period, 1.4);
  EXPECT_EQ(back.parameter_names, r.parameter_names);
  ASSERT_NE(back.find_parameter("parallax_offset_mas"), nullptr);
  EXPECT_DOUBLE_EQ(back.find_parameter("parallax_offset_mas")->prior_sigma(), 0.01);
  EXPECT_FALSE(back.find_parameter("alpha")->fixed());
  EXPECT_TRUE(std::isnan(back.covariance[1][0]));
  EXPECT_EQ(back.rejected.at(0).reason, "ruwe above 1.4");
  EXPECT_EQ(back.n_used, 1);
  EXPECT_EQ(to_json(back), to_json(r));
}

TEST(FitResultSchema, ParametersWithoutNamesTakeTheirParameterNames) {
  const nlohmann::json j = {{"name", "V"},
                            {"parameter_names", {"alpha", "beta"}},
                            {"parameters", {{{"value", -4.0}}, {{"value", -2.8}}}}};
  const FitRelationRecord r = fit_relation_from_json(j);
  ASSERT_NE(r.find_parameter("beta"), nullptr);
  EXPECT_EQ(r.find_parameter("beta")->value, -2.8);
  EXPECT_TRUE(std::isnan(r.pivot_log_period));
}

TEST(FitResultSchema, BrokenFileNamesTheFileAndTheKey) {
  nlohmann::json fit = {{"relations",
                         {{{"name", "V"},
                           {"pivot_log_period", 1.0},
                           {"parameter_names", {"alpha"}},
                           {"parameters", {{{"name", "alpha"}, {"mode", "free"}, {"value", -4.0}}}},
                           {"covariance", {{1e-4}}}}}}};
  try {
    check_fit_document(fit, "old/fit.json");
    FAIL() << "a parameter without its error passed";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "fit_schema");
    EXPECT_EQ(e.where().file, "old/fit.json");
    EXPECT_EQ(e.where().column, "relations[0].parameters[0].error");
  }
  fit["relations"][0]["parameters"][0]["error"] = nullptr;
  EXPECT_NO_THROW(check_fit_document(fit, "old/fit.json"));
}

}  // namespace
}  // namespace rungcal
