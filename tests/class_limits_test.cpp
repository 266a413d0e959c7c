// SPDX-License-Identifier: MIT
// Tests of the per-star limits by class (ClassLimits, lib/rungcal/ingest/row_checks.cpp): a
// star's parallax above its class's limit or its period outside its class's known range is
// refused naming its line and rule, kept with a warning naming file, line and rule, or not
// checked, per quantity.
#include <gtest/gtest.h>

#include <string>

#include "rungcal/ingest/ingest.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// Line 3: a classical Cepheid at 150 mas; line 4: a classical Cepheid of 0.1 d; line 5: an RR
// Lyrae star of 2.5 d. Invented stars (the limits are about the values, not the stars).
constexpr const char* kStars =
    "id,P,plx,plx_err,V,V_err,class\n"
    "S1,5.0,0.5,0.05,12.0,0.02,DCEP\n"
    "S2,10.0,150.0,0.08,11.0,0.02,DCEP\n"
    "S3,0.1,0.3,0.04,10.0,0.02,DCEP\n"
    "S4,2.5,0.3,0.04,13.0,0.02,RRLYR\n";

std::string config(const std::string& validate = "") {
  return "[source]\npath = \"stars.csv\"\n[columns]\nid = \"id\"\nperiod = \"P\"\n"
         "mode = { value = \"fundamental\" }\npulsator_class = \"class\"\nparallax = \"plx\"\n"
         "parallax_err = \"plx_err\"\n[bands.V]\nmag = \"V\"\nerr = \"V_err\"\n"
         "[output]\ncatalog = \"out/cat.fits\"\n" +
         (validate.empty() ? "" : "[validate]\n" + validate);
}

IngestResult ingest(const test::TempDir& dir, const std::string& validate = "") {
  test::write_text(dir.file("stars.csv"), kStars);
  test::write_text(dir.file("c.toml"), config(validate));
  return run_ingest(ingest_options_from_file(dir.file("c.toml")));
}

TEST(ClassLimits, StarsBeyondTheirClassAreRefusedNamingLineAndRule) {
  test::TempDir dir;
  const IngestResult r = ingest(dir);
  EXPECT_EQ(r.catalog.rows(), 1u);
  ASSERT_EQ(r.rejected.size(), 3u);
  EXPECT_EQ(r.rejected[0].source_row, 3);
  EXPECT_EQ(r.rejected[0].rule, "parallax_above_class_limit");
  EXPECT_EQ(r.rejected[0].column, "plx");
  EXPECT_EQ(r.rejected[0].message,
            "parallax 150 mas is above the 100 mas no classical_cepheid star reaches ([validate."
            "class_parallax_max_mas]; class_parallax_check = \"warn\" keeps it)");
  EXPECT_EQ(r.rejected[1].source_row, 4);
  EXPECT_EQ(r.rejected[1].rule, "period_outside_class_range");
  EXPECT_EQ(r.rejected[1].column, "P");
  EXPECT_EQ(r.rejected[2].source_row, 5);
  EXPECT_EQ(r.rejected[2].rule, "period_outside_class_range");
  EXPECT_NE(r.rejected[2].message.find("outside the known [0.15, 1.2] d of rr_lyrae stars"),
            std::string::npos)
      << r.rejected[2].message;
}

TEST(ClassLimits, WarnKeepsTheStarAndNamesFileLineAndRule) {
  test::TempDir dir;
  test::write_text(dir.file("stars.csv"), kStars);
  test::write_text(dir.file("c.toml"),
                   config("class_parallax_check = \"warn\"\nclass_period_check = \"off\"\n"));
  const test::CommandResult r = test::run_stage("ingest", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(
      r.output.find("stars.csv: line 3: star 'S2': [parallax_above_class_limit] parallax 150 mas"),
      std::string::npos)
      << r.output;
  EXPECT_EQ(r.output.find("period_outside_class_range"), std::string::npos) << r.output;
  EXPECT_EQ(
      ingest(dir, "class_parallax_check = \"off\"\nclass_period_check = \"off\"\n").catalog.rows(),
      4u);
}

TEST(ClassLimits, LimitsAreConfigurablePerClass) {
  test::TempDir dir;
  // A wider RR Lyrae range keeps S4; a tighter Cepheid parallax limit refuses S1 (0.5 mas).
  const IngestResult r = ingest(dir,
                                "[validate.class_period_known_range_d]\nrr_lyrae = [0.1, 3.0]\n"
                                "[validate.class_parallax_max_mas]\nclassical_cepheid = 0.4\n");
  ASSERT_EQ(r.rejected.size(), 3u);
  EXPECT_EQ(r.rejected[0].id, "S1");
  EXPECT_EQ(r.rejected[0].rule, "parallax_above_class_limit");
  EXPECT_EQ(r.catalog.rows(), 1u);  // S4
}

TEST(ClassLimits, ABadLimitIsAConfigErrorWithExit2) {
  test::TempDir dir;
  test::write_text(dir.file("stars.csv"), kStars);
  for (const auto& [validate, expected] :
       {std::pair{"[validate.class_period_known_range_d]\ncepheid = [1.0, 2.0]\n",
                  "class_period_known_range_d.cepheid': [config_value] not a pulsator class"},
        {"[validate.class_period_known_range_d]\nrr_lyrae = [2.0, 1.0]\n",
         "must be [min, max] days with 0 < min < max"},
        {"[validate.class_parallax_max_mas]\nrr_lyrae = -1.0\n", "must be positive (mas)"},
        {"class_period_check = \"sometimes\"\n", "[config_value]"}}) {
    test::write_text(dir.file("c.toml"), config(validate));
    const test::CommandResult r = test::run_stage("ingest", "--config " + dir.file("c.toml"));
    EXPECT_EQ(r.exit_code, 2) << validate << r.output;
    EXPECT_NE(r.output.find(expected), std::string::npos) << r.output;
  }
}

}  // namespace
}  // namespace rungcal
