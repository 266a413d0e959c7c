// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/deredden and pipeline/rungcal-deredden: dereddened and Wesenheit
// magnitudes, their errors checked by Monte Carlo, the products read by astropy.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>

#include "rungcal/core/error.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/deredden/deredden.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

StarTable two_band_catalog(const std::vector<std::array<double, 3>>& v_i_ebv, double sv, double si,
                           double se) {
  StarTable t;
  for (const char* c : {"mag_V", "mag_err_V", "mag_I", "mag_err_I", "ebv", "ebv_err"})
    t.add_column(c, ColumnType::kReal, "mag");
  for (const auto& row : v_i_ebv) {
    t.column("mag_V").push_real(row[0]);
    t.column("mag_err_V").push_real(sv);
    t.column("mag_I").push_real(row[1]);
    t.column("mag_err_I").push_real(si);
    t.column("ebv").push_real(row[2]);
    t.column("ebv_err").push_real(se);
  }
  t.set_keyword(key::kBands, std::string("V,I"));
  return t;
}

BandTable vi_table() {
  BandTable b;
  b.add(Band{"V", "", 5450.0, WavelengthKind::kEffective, "", std::nullopt});
  b.add(Band{"I", "", 7980.0, WavelengthKind::kEffective, "", std::nullopt});
  b.add(WesenheitDef{"W_VI", "I", "V", "I", 1.55, ""});
  return b;
}

DereddenOptions vi_options() {
  DereddenOptions o;
  o.input_path = "in.fits";
  o.bands_file = "bands.toml";
  o.law = ExtinctionLaw::kCCM89;
  o.wesenheit = {"W_VI"};
  return o;
}

TEST(Deredden, ValuesAndErrorsOfOneStar) {
  StarTable in = two_band_catalog({{12.0, 11.0, 0.5}}, 0.02, 0.03, 0.1);
  DereddenResult r = run_deredden(vi_options(), in, vi_table());
  double rv = 3.1 * extinction_ratio(ExtinctionLaw::kCCM89, 5450.0, 3.1);
  double ri = 3.1 * extinction_ratio(ExtinctionLaw::kCCM89, 7980.0, 3.1);
  const StarTable& c = r.catalog;
  EXPECT_NEAR(c.column("mag0_V").real[0], 12.0 - rv * 0.5, 1e-12);
  EXPECT_NEAR(c.column("mag0_err_V").real[0], std::hypot(0.02, rv * 0.1), 1e-12);
  EXPECT_NEAR(c.column("a_I").real[0], ri * 0.5, 1e-12);
  EXPECT_NEAR(c.column("a_err_I").real[0], ri * 0.1, 1e-12);
  // W_VI = I - 1.55 (V - I) = 2.55 I - 1.55 V; the error counts I twice.
  EXPECT_NEAR(c.column("mag0_W_VI").real[0], 11.0 - 1.55 * 1.0, 1e-12);
  EXPECT_NEAR(c.column("mag0_err_W_VI").real[0], std::hypot(2.55 * 0.03, 1.55 * 0.02), 1e-12);
  // COEFFS: the residual reddening the given R leaves under the law.
  ASSERT_EQ(r.coefficients.size(), 3u);
  EXPECT_NEAR(r.coefficients[2].a_over_ebv, ri - 1.55 * (rv - ri), 1e-12);
}

TEST(Deredden, LawWesenheitIsReddeningFree) {
  DereddenOptions o = vi_options();
  o.wesenheit_source = WesenheitSource::kLaw;
  StarTable in =
      two_band_catalog({{12.0, 11.0, 0.0}, {12.0 + 3.0, 11.0 + 1.8, 1.0}}, 0.02, 0.02, 0.0);
  // Redden the second star by the law exactly: its W must equal the first's.
  double rv = 3.1 * extinction_ratio(ExtinctionLaw::kCCM89, 5450.0, 3.1);
  double ri = 3.1 * extinction_ratio(ExtinctionLaw::kCCM89, 7980.0, 3.1);
  in.column("mag_V").real[1] = 12.0 + rv;
  in.column("mag_I").real[1] = 11.0 + ri;
  DereddenResult r = run_deredden(o, in, vi_table());
  EXPECT_NEAR(r.catalog.column("mag0_W_VI").real[1], r.catalog.column("mag0_W_VI").real[0], 1e-12);
  EXPECT_NEAR(r.coefficients[2].a_over_ebv, 0.0, 1e-12);
}

TEST(Deredden, ErrorPropagationMatchesMonteCarlo) {
  // Independent check: draw V, I and E(B-V) with their errors 40,000 times; the scatter of
  // the dereddened and Wesenheit magnitudes, and the covariance the shared E(B-V) induces
  // between bands (R_V R_I sigma_E^2), must match the propagated values.
  const double sv = 0.03, si = 0.02, se = 0.05;
  Random rng(7);
  std::vector<std::array<double, 3>> rows;
  for (int k = 0; k < 40000; ++k)
    rows.push_back({rng.normal(14.0, sv), rng.normal(13.0, si), rng.normal(0.6, se)});
  DereddenResult r = run_deredden(vi_options(), two_band_catalog(rows, sv, si, se), vi_table());
  auto stats = [&](const std::string& a, const std::string& b) {
    const auto& x = r.catalog.column(a).real;
    const auto& y = r.catalog.column(b).real;
    double mx = 0, my = 0;
    for (std::size_t i = 0; i < x.size(); ++i) mx += x[i], my += y[i];
    mx /= static_cast<double>(x.size());
    my /= static_cast<double>(y.size());
    double c = 0;
    for (std::size_t i = 0; i < x.size(); ++i) c += (x[i] - mx) * (y[i] - my);
    return c / static_cast<double>(x.size() - 1);
  };
  double rv = r.coefficients[0].a_over_ebv, ri = r.coefficients[1].a_over_ebv;
  double sd_v = std::sqrt(stats("mag0_V", "mag0_V")),
         sd_w = std::sqrt(stats("mag0_W_VI", "mag0_W_VI"));
  EXPECT_NEAR(sd_v / r.catalog.column("mag0_err_V").real[0], 1.0, 0.02);
  EXPECT_NEAR(sd_w / r.catalog.column("mag0_err_W_VI").real[0], 1.0, 0.02);
  EXPECT_NEAR(stats("mag0_V", "mag0_I") / (rv * ri * se * se), 1.0, 0.05);
}

TEST(Deredden, StageRunsOnTheDemoCatalogAndAstropyReadsIt) {
  test::TempDir dir;
  std::string cat = dir.file("catalog.fits"), out = dir.file("dered.fits");
  auto r = test::run_stage(
      "ingest", "--config " + test::source_file("config/demo/ingest.toml") + " --out " + cat);
  ASSERT_EQ(r.exit_code, 0) << r.output;
  test::write_text(
      dir.file("d.toml"),
      "[deredden]\ninput = \"catalog.fits\"\noutput = \"dered.fits\"\nbands_file = \"" +
          test::source_file("config/bands.toml") +
          "\"\nlaw = \"odonnell94\"\nr_v = 3.1\nwesenheit = [\"W_VI\", \"W_G\"]\n");
  r = test::run_stage("deredden", "--config " + dir.file("d.toml"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  auto py = test::run_python(R"(
import sys, warnings
from astropy.table import Table
from astropy.io import fits
warnings.simplefilter("error")
t = Table.read(sys.argv[1], hdu="CATALOG"); c = Table.read(sys.argv[1], hdu="COEFFS")
h = fits.getheader(sys.argv[1], "CATALOG")
print(len(t), str(t["mag0_V"].unit), h["RGLAW"], h["RGRV"], h["RGSTAGE"], list(c["name"])[-2:], [float(x) for x in c["wesenheit_r"][-2:]])
)",
                             {out});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  EXPECT_NE(py.output.find("170 mag odonnell94 3.1 deredden ['W_VI', 'W_G'] [1.55, 1.9]"),
            std::string::npos)
      << py.output;
}

TEST(Deredden, QueryModePrintsOneLinePerWavelength) {
  auto r = test::run_stage("deredden", "--law ccm89 --rv 3.1 --wavelength 5494.505494505494 12500");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(r.output.substr(0, r.output.find('\n')), "5494.51 1.0000000000");
  EXPECT_NE(r.output.find("\n12500 0.28"), std::string::npos) << r.output;
  r = test::run_stage("deredden", "--law ccm90 --wavelength 5500");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("ccm89, odonnell94, fitzpatrick99"), std::string::npos) << r.output;
  r = test::run_stage("deredden", "--law ccm89 --wavelength 500");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[outside_law_range]"), std::string::npos) << r.output;
}

TEST(Deredden, BadInputsStopCleanly) {
  test::TempDir dir;
  std::string cat = dir.file("catalog.fits");
  ASSERT_EQ(test::run_stage("ingest", "--config " + test::source_file("config/demo/ingest.toml") +
                                          " --out " + cat)
                .exit_code,
            0);
  std::string head =
      "[deredden]\ninput = \"catalog.fits\"\noutput = \"out/d.fits\"\nbands_file = \"" +
      test::source_file("config/bands.toml") + "\"\n";
  struct Case {
    std::string extra, rule;
  };
  const Case cases[] = {{"wesenheit = [\"W_XYZ\"]\n", "unknown_wesenheit"},
                        {"bands = [\"U\"]\n", "missing_column"},
                        {"law = \"cardelli\"\n", "config_value"},
                        {"r_v = -1\n", "config_value"},
                        {"lawz = \"ccm89\"\n", "unknown_config_key"}};
  for (const auto& c : cases) {
    test::write_text(dir.file("d.toml"), head + c.extra);
    auto r = test::run_stage("deredden", "--config " + dir.file("d.toml"));
    EXPECT_EQ(r.exit_code, 2) << c.extra << r.output;
    EXPECT_NE(r.output.find("[" + c.rule + "]"), std::string::npos) << r.output;
    EXPECT_FALSE(test::file_exists(dir.file("out")));
  }
}

TEST(Deredden, AWesenheitNeedsNoReddening) {
  // A catalog without E(B-V): the Wesenheit is formed, bands are left alone.
  StarTable in = two_band_catalog({{12.0, 11.0, 0.5}}, 0.02, 0.03, 0.1);
  in.remove_column("ebv");
  in.remove_column("ebv_err");
  DereddenResult r = run_deredden(vi_options(), in, vi_table());
  EXPECT_NEAR(r.catalog.column("mag0_W_VI").real[0], 11.0 - 1.55 * 1.0, 1e-12);
  EXPECT_FALSE(r.catalog.has("mag0_V"));
  ASSERT_EQ(r.coefficients.size(), 1u);
  EXPECT_TRUE(r.coefficients[0].wesenheit);
  // A band asked for by name still needs E(B-V).
  DereddenOptions o = vi_options();
  o.bands = {"V"};
  try {
    run_deredden(o, in, vi_table());
    ADD_FAILURE() << "dereddened V without E(B-V)";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "missing_column");
    EXPECT_NE(std::string(e.what()).find("a Wesenheit magnitude needs none"), std::string::npos);
  }
  // Neither bands nor a Wesenheit: dereddening every band needs E(B-V).
  o = vi_options();
  o.wesenheit.clear();
  EXPECT_THROW(run_deredden(o, in, vi_table()), InputError);
}

TEST(Deredden, WesenheitOnlyStageOnTheLmcCepheidsWithoutReddening) {
  // OGLE-IV LMC fundamental-mode Cepheids (Soszynski et al. 2015, Acta Astron. 65, 297):
  // no E(B-V) in the list. W_I = I - 1.55 (V - I); the published relation
  // W_I = 15.88 - 3.31 log P (reference README, approximate; an independent clipped fit
  // gives 15.889 - 3.315 log P) sets the median intercept.
  test::TempDir dir;
  const std::string cat = dir.file("lmc.fits");
  auto ingest = test::run_stage(
      "ingest", "--config " + test::source_file("config/reference/lmc_fundamental_cepheids.toml") +
                    " --out " + cat);
  ASSERT_EQ(ingest.exit_code, 0) << ingest.output;
  test::write_text(dir.file("d.toml"),
                   "[deredden]\ninput = \"lmc.fits\"\noutput = \"w.fits\"\n"
                   "bands_file = \"" +
                       test::source_file("config/bands.toml") + "\"\nwesenheit = [\"W_VI\"]\n");
  auto r = test::run_stage("deredden", "--config " + dir.file("d.toml"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  StarTable w = read_fits_table(dir.file("w.fits"), {"CATALOG", 0}).table;
  EXPECT_FALSE(w.has("mag0_V"));
  const Column& id = w.column(col::kId);
  const Column& wm = w.column("mag0_W_VI");
  std::vector<double> intercepts;
  for (std::size_t i = 0; i < w.rows(); ++i) {
    if (wm.is_null(i)) continue;
    intercepts.push_back(wm.real[i] + 3.31 * w.column(col::kLogPeriod).real[i]);
    // Last line of the file: OGLE-LMC-CEP-4712, I 15.372, V 16.087.
    if (id.text[i] == "OGLE-LMC-CEP-4712") {
      EXPECT_NEAR(wm.real[i], 15.372 - 1.55 * (16.087 - 15.372), 1e-9);
    }
  }
  EXPECT_EQ(intercepts.size(), 2315u);  // the stars with both V and I
  std::nth_element(intercepts.begin(), intercepts.begin() + intercepts.size() / 2,
                   intercepts.end());
  EXPECT_NEAR(intercepts[intercepts.size() / 2], 15.88, 0.03);
  // Asking for a band by name without E(B-V) stops with exit 2 and writes nothing.
  test::write_text(dir.file("d2.toml"), test::read_text(dir.file("d.toml")) + "bands = [\"V\"]\n");
  test::write_text(dir.file("d2.toml"),
                   test::replaced(test::read_text(dir.file("d2.toml")), {{"w.fits", "w2.fits"}}));
  r = test::run_stage("deredden", "--config " + dir.file("d2.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[missing_column]"), std::string::npos) << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("w2.fits")));
}

}  // namespace
}  // namespace rungcal
