// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/ingest/lightcurve_join: a star list with ids and periods but no
// magnitudes gets them from its light curves, and the photometry rule waits for the join.
// Invented stars (a summary written here), no published data.
#include <gtest/gtest.h>

#include <cmath>

#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/ingest/lightcurve_join.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// A rungcal-lightcurve summary (HDU SUMMARY) of three stars: Vell-1 and Vell-2 usable,
// Vell-3 without a usable period and without means.
void write_summary(const std::string& path) {
  StarTable s;
  s.add_column("id", ColumnType::kText);
  s.add_column("period_d", ColumnType::kReal, "d");
  s.add_column("period_err_d", ColumnType::kReal, "d");
  s.add_column("usable", ColumnType::kBoolean);
  for (const char* b : {"V", "I"}) {
    s.add_column(std::string("mag_") + b, ColumnType::kReal, "mag");
    s.add_column(std::string("mag_err_") + b, ColumnType::kReal, "mag");
  }
  auto row = [&](const char* id, double p, bool usable, double v, double i) {
    s.column("id").push_text(id);
    s.column("period_d").push_real(p);
    s.column("period_err_d").push_real(1e-5);
    s.column("usable").push_boolean(usable);
    s.column("mag_V").push_real(v);
    s.column("mag_err_V").push_real(std::isnan(v) ? v : 0.01);
    s.column("mag_I").push_real(i);
    s.column("mag_err_I").push_real(std::isnan(i) ? i : 0.008);
  };
  const double nan = std::nan("");
  row("Vell-1", 5.366, true, 15.2, 14.5);
  row("Vell-2", 12.01, true, 14.1, 13.2);
  row("Vell-3", 3.3, false, nan, nan);
  write_fits_tables(path, {{"SUMMARY", &s}});
}

// A star list: ids and periods only, no magnitude column, no [bands].
const char* kStarList =
    "star,P\n"
    "Vell-1,5.3660\n"
    "Vell-4,7.5\n"  // no light curve: no photometry after the join
    "Vell-2,12.0100\n"
    "Vell-3,3.3\n";  // a light curve without a usable period or means

std::string star_list_config() {
  return "[source]\npath = \"stars.csv\"\n"
         "[columns]\nid = \"star\"\nperiod = \"P\"\nmode = { value = \"fundamental\" }\n"
         "pulsator_class = { value = \"classical_cepheid\" }\n"
         "[lightcurves]\nsummary = \"lc.fits\"\n"
         "[output]\ncatalog = \"out/cat.fits\"\n";
}

TEST(LightCurveJoin, AStarListWithoutMagnitudesGetsThemFromItsLightCurves) {
  test::TempDir dir;
  write_summary(dir.file("lc.fits"));
  test::write_text(dir.file("stars.csv"), kStarList);
  test::write_text(dir.file("c.toml"), star_list_config());
  IngestOptions o = ingest_options_from_file(dir.file("c.toml"));
  EXPECT_TRUE(o.bands.empty());
  IngestResult r = run_ingest(o);
  const StarTable& cat = r.catalog;
  ASSERT_EQ(cat.rows(), 2u);
  EXPECT_EQ(r.stars, 2u);
  EXPECT_EQ(cat.column(col::kId).text, (std::vector<std::string>{"Vell-1", "Vell-2"}));
  EXPECT_DOUBLE_EQ(cat.column("mag_V").real[0], 15.2);
  EXPECT_DOUBLE_EQ(cat.column("mag_err_I").real[1], 0.008);
  EXPECT_EQ(cat.column("period_origin").text[1], "lightcurve");
  EXPECT_EQ(std::get<std::string>(cat.keyword(key::kBands)->value), "V,I");
  EXPECT_EQ(r.magnitudes_joined, 4u);
  // The rows without photometry after the join are refused, in input order, naming the rule.
  ASSERT_EQ(r.rejected.size(), 2u);
  EXPECT_EQ(r.rejected[0].source_row, 3);
  EXPECT_EQ(r.rejected[0].id, "Vell-4");
  EXPECT_EQ(r.rejected[0].rule, "no_photometry");
  EXPECT_EQ(r.rejected[0].message,
            "the star has no magnitude in any configured band, nor from its light curve");
  EXPECT_EQ(r.rejected[1].id, "Vell-3");
  EXPECT_EQ(r.rejected[1].source_row, 5);
}

TEST(LightCurveJoin, TheStageWritesTheJoinedCatalogAndItsRejects) {
  test::TempDir dir;
  write_summary(dir.file("lc.fits"));
  test::write_text(dir.file("stars.csv"), kStarList);
  test::write_text(dir.file("c.toml"), star_list_config());
  auto run = test::run_stage("ingest", "--config " + dir.file("c.toml"));
  ASSERT_EQ(run.exit_code, 0) << run.output;
  StarTable cat = read_fits_table(dir.file("out/cat.fits"), {"CATALOG", 0}).table;
  EXPECT_EQ(cat.rows(), 2u);
  StarTable rej = read_fits_table(dir.file("out/cat.fits"), {"REJECTS", 0}).table;
  ASSERT_EQ(rej.rows(), 2u);
  EXPECT_EQ(rej.column("rule").text[0], "no_photometry");
  EXPECT_NE(test::read_text(dir.file("out/cat_rejects.csv")).find("Vell-4"), std::string::npos);
}

TEST(LightCurveJoin, NoStarWithPhotometryAfterTheJoinStopsWithExit2AndWritesNothing) {
  test::TempDir dir;
  write_summary(dir.file("lc.fits"));
  test::write_text(dir.file("stars.csv"), "star,P\nVell-3,3.3\nVell-9,4.0\n");
  test::write_text(dir.file("c.toml"), star_list_config());
  auto run = test::run_stage("ingest", "--config " + dir.file("c.toml"));
  EXPECT_EQ(run.exit_code, 2) << run.output;
  EXPECT_NE(run.output.find("[no_rows_left]"), std::string::npos) << run.output;
  EXPECT_NE(run.output.find("stars.csv"), std::string::npos) << run.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
}

// The message of the config_value error an ingest config stops with ("" if it is accepted).
std::string config_error(const std::string& config) {
  test::TempDir dir;
  test::write_text(dir.file("c.toml"), config);
  try {
    ingest_options_from_file(dir.file("c.toml"));
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "config_value");
    return e.what();
  }
  return "";
}

// The text with its first occurrence of part removed.
std::string without(std::string text, const std::string& part) {
  return text.erase(text.find(part), part.size());
}

TEST(LightCurveJoin, WithoutAJoinABandIsStillRequired) {
  const std::string error =
      config_error(without(star_list_config(), "[lightcurves]\nsummary = \"lc.fits\"\n"));
  EXPECT_NE(error.find("[lightcurves] join"), std::string::npos) << error;
}

// A star list of ids alone: the join supplies periods and magnitudes; a star whose light curve
// gave no usable period, or that has none, is refused after the join with "no_period".
TEST(LightCurveJoin, AStarListOfIdsAloneGetsItsPeriodsFromItsLightCurves) {
  test::TempDir dir;
  write_summary(dir.file("lc.fits"));
  test::write_text(dir.file("stars.csv"), "star\nVell-1\nVell-4\nVell-2\nVell-3\n");
  test::write_text(dir.file("c.toml"), without(star_list_config(), "period = \"P\"\n"));
  IngestOptions o = ingest_options_from_file(dir.file("c.toml"));
  EXPECT_FALSE(o.quantities.count("period"));
  IngestResult r = run_ingest(o);
  ASSERT_EQ(r.catalog.rows(), 2u);
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kPeriod).real[0], 5.366);
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kLogPeriod).real[1], std::log10(12.01));
  EXPECT_EQ(r.catalog.column("period_origin").text[0], "lightcurve");
  EXPECT_EQ(r.periods_joined, 2u);
  ASSERT_EQ(r.rejected.size(), 2u);
  EXPECT_EQ(r.rejected[0].id, "Vell-4");
  EXPECT_EQ(r.rejected[0].rule, "no_period");
  EXPECT_EQ(r.rejected[0].message,
            "the star has no period: the star list gives none and its light curve gave no usable "
            "one");
  EXPECT_EQ(r.rejected[1].id, "Vell-3");
  EXPECT_EQ(r.rejected[1].rule, "no_period");
}

// A period the join gives is checked against [validate]'s class ranges as a catalog's own
// is: Vell-1's 5.4 d and Vell-2's 12 d are no RR Lyrae periods (0.15-1.2 d, the ClassLimits
// default, recalled from memory).
TEST(LightCurveJoin, JoinedPeriodsMeetTheClassPeriodChecks) {
  test::TempDir dir;
  write_summary(dir.file("lc.fits"));
  test::write_text(dir.file("stars.csv"), "star\nVell-1\nVell-2\n");
  const std::string config = test::replaced(without(star_list_config(), "period = \"P\"\n"),
                                            {{"classical_cepheid", "rr_lyrae"}});
  test::write_text(dir.file("c.toml"), config);
  // Both refused: nothing is left, and the error names the first refusal.
  try {
    run_ingest(ingest_options_from_file(dir.file("c.toml")));
    ADD_FAILURE() << "a catalog of stars all refused was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "no_rows_left");
    EXPECT_NE(e.detail().find("the first, star 'Vell-1' (row 2): [period_outside_class_range] "
                              "light-curve period ("),
              std::string::npos)
        << e.detail();
    EXPECT_NE(e.detail().find("lc.fits) 5.366 d is outside the known [0.15, 1.2] d of "
                              "rr_lyrae stars"),
              std::string::npos)
        << e.detail();
  }
  // With class_period_check = "warn" both are kept; a plausible range refuses outright.
  test::write_text(dir.file("c.toml"), config + "[validate]\nclass_period_check = \"warn\"\n");
  EXPECT_EQ(run_ingest(ingest_options_from_file(dir.file("c.toml"))).catalog.rows(), 2u);
  test::write_text(dir.file("c.toml"), config +
                                           "[validate]\nclass_period_check = \"warn\"\n"
                                           "[validate.class_period_range_d]\n"
                                           "rr_lyrae = [0.1, 10.0]\n");
  const IngestResult r = run_ingest(ingest_options_from_file(dir.file("c.toml")));
  ASSERT_EQ(r.rejected.size(), 1u);
  EXPECT_EQ(r.rejected[0].id, "Vell-2");
  EXPECT_EQ(r.rejected[0].rule, "period_out_of_range");
}

// Without a join, or with a join told not to take periods, a period column is required.
TEST(LightCurveJoin, WithoutPeriodsFromTheJoinAPeriodColumnIsRequired) {
  std::string config = without(star_list_config(), "period = \"P\"\n");
  config.insert(config.find("[output]"), "periods = false\n");
  const std::string error = config_error(config);
  EXPECT_NE(error.find("key 'columns.period': [config_value] required (a period or log-period "
                       "column, or a [lightcurves] join that supplies the periods)"),
            std::string::npos)
      << error;
}

}  // namespace
}  // namespace rungcal
