// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/ingest/unit_sanity: whole-column unit mistakes are found from their
// medians, refused (exit 2, naming file, column and rule) or warned about as configured.
// End to end on the Milky Way Cepheids of Riess et al. 2018, ApJ 861, 126 (reference data).
#include <gtest/gtest.h>

#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/ingest/unit_sanity.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

UnitSample sample(std::vector<double> plx, std::vector<double> periods, const std::string& cls,
                  const std::string& period_unit = "d") {
  UnitSample s;
  s.file = "stars.csv";
  s.parallax_mas = std::move(plx);
  s.parallax_column = "plx";
  s.parallax_unit = "arcsec";
  s.period_d_by_class[cls] = std::move(periods);
  s.period_column = "P";
  s.period_unit = period_unit;
  return s;
}

TEST(UnitSanity, PlausibleMediansPass) {
  const UnitSanityOptions o;
  EXPECT_TRUE(find_unit_mistakes(
                  sample({0.3, -0.1, 0.5, 1.2, 0.2}, {5, 10, 3, 30, 7}, "classical_cepheid"), o)
                  .empty());
  EXPECT_TRUE(find_unit_mistakes(
                  sample({0.3, 0.4, 0.5, 1.2, 0.2}, {0.5, 0.6, 0.3, 0.7, 0.55}, "rr_lyrae"), o)
                  .empty());
  // Too few values to judge: four absurd parallaxes pass here (the row rules still apply).
  EXPECT_TRUE(find_unit_mistakes(sample({500, 400, 300, 200}, {}, "other"), o).empty());
}

TEST(UnitSanity, ParallaxesInTheWrongUnitAreFound) {
  const UnitSanityOptions o;
  auto high = find_unit_mistakes(
      sample({300, -100, 500, 1200, 200}, {5, 10, 3, 30, 7}, "classical_cepheid"), o);
  ASSERT_EQ(high.size(), 1u);
  EXPECT_EQ(high[0].rule, "parallax_unit");
  EXPECT_EQ(high[0].column, "plx");
  EXPECT_EQ(high[0].message,
            "the median |parallax| of 5 stars is 300 mas, above the plausible 20 mas for "
            "pulsating stars ([validate] parallax_median_range_mas); the column was read with "
            "unit 'arcsec': are the values mas mapped as arcsec?");
  auto low = find_unit_mistakes(
      sample({3e-4, 1e-4, 5e-4, 2e-3, 2e-4, 1e-3}, {5, 10, 3, 30, 7}, "classical_cepheid"), o);
  ASSERT_EQ(low.size(), 1u);
  EXPECT_NE(low[0].message.find("median |parallax| of 6 stars is 0.0004 mas, below"),
            std::string::npos)
      << low[0].message;
}

TEST(UnitSanity, PeriodsInTheWrongUnitAreFoundPerClass) {
  const UnitSanityOptions o;
  // Days read as log_d: 10^5 ... 10^30 d.
  auto log_read =
      find_unit_mistakes(sample({}, {1e5, 1e10, 1e3, 1e30, 1e7}, "classical_cepheid", "log_d"), o);
  ASSERT_EQ(log_read.size(), 1u);
  EXPECT_EQ(log_read[0].rule, "period_unit");
  EXPECT_NE(log_read[0].message.find("are the values days mapped as log_d?"), std::string::npos);
  // log10(P/d) read as days.
  auto days_read =
      find_unit_mistakes(sample({}, {0.7, 1.0, 0.5, 1.5, 0.85}, "classical_cepheid"), o);
  ASSERT_EQ(days_read.size(), 1u);
  EXPECT_NE(days_read[0].message.find("want unit = \"log_d\""), std::string::npos);
  // The same periods are plausible for RR Lyrae stars; "other" is never checked.
  EXPECT_TRUE(find_unit_mistakes(sample({}, {0.7, 1.0, 0.5, 1.1, 0.85}, "rr_lyrae"), o).empty());
  EXPECT_TRUE(find_unit_mistakes(sample({}, {1e5, 1e10, 1e3, 1e30, 1e7}, "other"), o).empty());
}

TEST(UnitSanity, PolicyRefusesWarnsOrIsOff) {
  UnitSanityOptions o;
  const UnitSample s = sample({300, 100, 500, 1200, 200}, {5, 10, 3, 30, 7}, "classical_cepheid");
  try {
    apply_unit_checks(s, o);
    ADD_FAILURE() << "not refused";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "parallax_unit");
    EXPECT_NE(std::string(e.what()).find("stars.csv"), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find("'plx'"), std::string::npos) << e.what();
  }
  o.policy = UnitCheckPolicy::kWarn;
  EXPECT_NO_THROW(apply_unit_checks(s, o));
  o.policy = UnitCheckPolicy::kOff;
  EXPECT_NO_THROW(apply_unit_checks(s, o));
  o.parallax_median_max_mas = 0.001;
  EXPECT_EQ(o.check(),
            "validate.parallax_median_range_mas: must be [min, max] mas with 0 < min < max");
}

// The reference config of Riess et al. 2018 (50 Milky Way Cepheids, Gaia DR2 parallaxes in
// mas, LogPeriod in log10 days), with one mapping edited.
std::string riess_config(const std::vector<std::pair<std::string, std::string>>& edits) {
  std::string c =
      test::read_text(test::source_file("config/reference/mw_cepheids_hst_gaiadr2.toml"));
  c = test::replaced(c, {{"../../../shared/reference/", test::reference_file("") + "/"}});
  return test::replaced(c, edits);
}

TEST(UnitSanity, RiessCepheidsWithParallaxesMappedAsArcsecStopWithExit2) {
  // Riess et al. 2018, ApJ 861, 126: median |parallax| 0.33 mas; read as arcsec, 330 mas.
  test::TempDir dir;
  test::write_text(
      dir.file("c.toml"),
      riess_config({{"parallax = { column = \"parallax\", unit = \"mas\" }",
                     "parallax = { column = \"parallax\", unit = \"arcsec\" }"},
                    {"parallax_err = { column = \"parallax_error\", unit = \"mas\" }",
                     "parallax_err = { column = \"parallax_error\", unit = \"arcsec\" }"}}));
  auto r = test::run_stage("ingest",
                           "--config " + dir.file("c.toml") + " --out " + dir.file("out/cat.fits"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("mw_cepheids_hst_gaiadr2.txt"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("column 'parallax'"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("[parallax_unit] the median |parallax| of 50 stars is 330.3 mas"),
            std::string::npos)
      << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
}

TEST(UnitSanity, RiessCepheidsWithLogPeriodsMappedAsDaysStopAndCanBeWarnedInstead) {
  // Riess et al. 2018: LogPeriod 0.903-1.839, median 1.1385; read as days, a median 1.14 d.
  test::TempDir dir;
  const std::string as_days =
      riess_config({{"period = { column = \"LogPeriod\", unit = \"log_d\" }",
                     "period = { column = \"LogPeriod\", unit = \"d\" }"}});
  test::write_text(dir.file("c.toml"), as_days);
  auto r = test::run_stage("ingest",
                           "--config " + dir.file("c.toml") + " --out " + dir.file("out/cat.fits"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[period_unit] the median period of 50 classical_cepheid stars is 1.13"),
            std::string::npos)
      << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
  // With unit_checks = "warn" the same input goes through, and the log says why it is odd.
  test::write_text(dir.file("w.toml"), as_days + "\n[validate]\nunit_checks = \"warn\"\n");
  r = test::run_stage("ingest",
                      "--config " + dir.file("w.toml") + " --out " + dir.file("out/cat.fits"));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("[period_unit]"), std::string::npos) << r.output;
  // A bad policy name is a config error.
  test::write_text(dir.file("b.toml"), as_days + "\n[validate]\nunit_checks = \"maybe\"\n");
  r = test::run_stage("ingest", "--config " + dir.file("b.toml"));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[config_value]"), std::string::npos) << r.output;
}

TEST(UnitSanity, AnImplausibleMedianAbsoluteMagnitudeIsFoundPerClassAndColumn) {
  UnitSanityOptions o;
  UnitSample s;
  s.file = "stars.csv";
  s.parallax_column = "plx";
  // M = m + 5 log10(parallax / 100 mas): a Cepheid sample near -4 passes; errors read as
  // magnitudes (about 0.02 mag at 0.3 mas) give M near -12.6.
  s.absolute_mag_by_class["classical_cepheid"]["V"] = {-4.1, -3.2, -5.0, -2.5, -4.4};
  s.absolute_mag_by_class["classical_cepheid"]["V_err"] = {-12.58, -12.57, -12.7, -12.5, -12.6};
  s.absolute_mag_by_class["rr_lyrae"]["V_err"] = {-12.58, -12.57, -12.7, -12.5};  // too few
  const std::vector<UnitFinding> found = find_unit_mistakes(s, o);
  ASSERT_EQ(found.size(), 1u);
  EXPECT_EQ(found[0].rule, "absolute_magnitude_median");
  EXPECT_EQ(found[0].column, "V_err");
  EXPECT_EQ(found[0].message,
            "the median absolute magnitude of 5 classical_cepheid stars with parallax / error >= 5 "
            "is -12.6 mag (m + 5 log10(parallax / 100 mas), no extinction), outside the class's "
            "plausible [-10.5, 4] mag ([validate.class_absolute_magnitude_median_range]): is this "
            "column a magnitude, and are the parallaxes (plx) in the unit mapped?");
  o.class_absolute_magnitude_median["classical_cepheid"] = {1.0, -1.0};
  EXPECT_NE(o.check().find("validate.class_absolute_magnitude_median_range.classical_cepheid"),
            std::string::npos);
}

TEST(UnitSanity, RiessCepheidsWithAnErrorColumnMappedAsTheMagnitudeStopWithExit2) {
  // Riess et al. 2018, ApJ 861, 126: F160W_error (0.01-0.03 mag) mapped as the F160W
  // magnitude; the 44 stars above 5 sigma give a median M of -12.3 (a numpy evaluation).
  test::TempDir dir;
  test::write_text(dir.file("c.toml"),
                   riess_config({{"mag = \"F160W\"", "mag = \"F160W_error\""}}));
  auto r = test::run_stage("ingest",
                           "--config " + dir.file("c.toml") + " --out " + dir.file("out/cat.fits"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("mw_cepheids_hst_gaiadr2.txt"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("column 'F160W_error'"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("[absolute_magnitude_median]"), std::string::npos) << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
}

}  // namespace
}  // namespace rungcal
