// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/ingest and pipeline/rungcal-ingest: the published reference tables
// ingest through config/reference/*.toml, rows break named rules, bad inputs stop cleanly.
#include <fmt/format.h>
#include <gtest/gtest.h>

#include <ostream>

#include <cmath>
#include <filesystem>

#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

IngestResult ingest_reference(const std::string& config_name, const std::string& out) {
  IngestOptions o = ingest_options_from_file(test::source_file("config/reference/" + config_name));
  o.catalog_path = out;
  IngestResult r = run_ingest(o);
  write_ingest_products(r, o);
  return r;
}

std::size_t row_of(const StarTable& t, const std::string& id) {
  const Column& c = t.column(col::kId);
  for (std::size_t i = 0; i < c.size(); ++i)
    if (c.text[i] == id) return i;
  return t.rows();
}

TEST(IngestReference, MilkyWayCepheidsHstGaiaDr2) {
  // Riess et al. 2018, ApJ 861, 126: 50 stars, 4 with FinalAnalysisFlag = 1 (RW CAM, RY VEL,
  // SV PER, T MON), whitespace table with '#' header, CRLF, "xxx" missing.
  test::TempDir dir;
  IngestResult r = ingest_reference("mw_cepheids_hst_gaiadr2.toml", dir.file("mw.fits"));
  EXPECT_EQ(r.rows_read, 50u);
  EXPECT_EQ(r.catalog.rows(), 46u);
  ASSERT_EQ(r.rejected.size(), 4u);
  std::vector<std::string> flagged;
  for (const auto& rej : r.rejected) {
    EXPECT_EQ(rej.rule, "selection");
    flagged.push_back(rej.id);
  }
  EXPECT_EQ(flagged, (std::vector<std::string>{"RW CAM", "RY VEL", "SV PER", "T MON"}));
  // Values as in the file (line 2, AA GEM): LogPeriod 1.053, parallax 0.18780788545791 mas,
  // F160W 7.348 +- 0.017, mWH 6.871.
  std::size_t aa = row_of(r.catalog, "AA GEM");
  ASSERT_LT(aa, r.catalog.rows());
  EXPECT_NEAR(r.catalog.column(col::kLogPeriod).real[aa], 1.053, 1e-12);
  EXPECT_NEAR(r.catalog.column(col::kPeriod).real[aa], std::pow(10.0, 1.053), 1e-9);
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kParallax).real[aa], 0.18780788545791);
  EXPECT_DOUBLE_EQ(r.catalog.column("mag_F160W").real[aa], 7.348);
  EXPECT_DOUBLE_EQ(r.catalog.column("mag_err_F160W").real[aa], 0.017);
  EXPECT_DOUBLE_EQ(r.catalog.column("mag_W_H").real[aa], 6.871);
  EXPECT_EQ(r.catalog.column("astrometric_params").integer[aa], 5);  // Gaia's 31 = 5-parameter
  EXPECT_EQ(r.catalog.column(col::kMode).text[aa], "fundamental");
  // "xxx" becomes null: AA GEM has no a_g_val; its G magnitude is present.
  EXPECT_FALSE(r.catalog.column("gaia_g_mag").is_null(aa));
}

TEST(IngestReference, RRLyraeDistancePriors) {
  // Klein & Bloom 2014, MNRAS 440, L96, Table 1: 134 stars, tab-separated, "---" missing.
  // Six stars have none of V, J, H, K, W1 and are rejected as "no_photometry".
  test::TempDir dir;
  IngestResult r = ingest_reference("rrlyrae_distance_priors.toml", dir.file("rr.fits"));
  EXPECT_EQ(r.rows_read, 134u);
  EXPECT_EQ(r.catalog.rows(), 128u);
  for (const auto& rej : r.rejected) EXPECT_EQ(rej.rule, "no_photometry") << rej.id;
  std::size_t k_count = 0;
  const Column& k = r.catalog.column("mag_Ks");
  for (std::size_t i = 0; i < k.size(); ++i) k_count += k.is_null(i) ? 0 : 1;
  EXPECT_EQ(k_count, 22u);  // the README of the reference data: 22 have K
  // First row of the file: AACMi, RRab, P = 0.4763 d, [Fe/H] = -0.15, mu prior 10.4730 +- 0.1384.
  std::size_t aa = row_of(r.catalog, "AACMi");
  EXPECT_EQ(r.catalog.column(col::kMode).text[aa], "fundamental");
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kPeriod).real[aa], 0.4763);
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kFeh).real[aa], -0.15);
  EXPECT_DOUBLE_EQ(r.catalog.column("mu_mag").real[aa], 10.4730);
  EXPECT_DOUBLE_EQ(r.catalog.column("mu_err_mag").real[aa], 0.1384);
  std::size_t ae = row_of(r.catalog, "AEBoo");
  EXPECT_EQ(r.catalog.column(col::kMode).text[ae], "first_overtone");  // RRc
}

TEST(IngestReference, LmcFundamentalCepheidsHeaderless) {
  // OGLE-IV LMC fundamental-mode Cepheids (Soszynski et al. 2015, Acta Astron. 65, 297):
  // 2,477 rows, no header, "-" missing, 2,315 with both V and I.
  test::TempDir dir;
  IngestResult r = ingest_reference("lmc_fundamental_cepheids.toml", dir.file("lmc.fits"));
  EXPECT_EQ(r.rows_read, 2477u);
  std::size_t both = 0;
  const Column& v = r.catalog.column("mag_V");
  const Column& i = r.catalog.column("mag_I");
  for (std::size_t k = 0; k < r.catalog.rows(); ++k)
    both += (!v.is_null(k) && !i.is_null(k)) ? 1 : 0;
  EXPECT_EQ(both, 2315u);
  EXPECT_EQ(r.catalog.rows() + r.rejected.size(), 2477u);
  // Last line of the file (no final newline): OGLE-LMC-CEP-4712, I 15.372, V 16.087, P 2.7551528 d.
  std::size_t last = row_of(r.catalog, "OGLE-LMC-CEP-4712");
  ASSERT_LT(last, r.catalog.rows());
  EXPECT_DOUBLE_EQ(r.catalog.column("mag_I").real[last], 15.372);
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kPeriod).real[last], 2.7551528);
  EXPECT_EQ(r.catalog.column(col::kSourceRow).integer[last], 2477);
}

TEST(IngestReference, AstropyOpensEveryCatalogWithUnitsAndProvenance) {
  test::TempDir dir;
  for (const char* c : {"mw_cepheids_hst_gaiadr2.toml", "rrlyrae_distance_priors.toml",
                        "lmc_fundamental_cepheids.toml"})
    ingest_reference(c, dir.file(std::string(c) + ".fits"));
  auto r = test::run_python(
      R"(
import sys, warnings
from astropy.table import Table
from astropy.io import fits
warnings.simplefilter("error")  # a unit astropy cannot parse fails the check
for path in sys.argv[1:]:
    t = Table.read(path, hdu="CATALOG")
    rej = Table.read(path, hdu="REJECTS")
    h = fits.getheader(path, "CATALOG")
    print(len(t), len(rej), str(t["period_d"].unit), h["RGSTAGE"], h["RGPRODUC"], len(h["RGSHA01"]), h["RGSCHEMA"])
)",
      {dir.file("mw_cepheids_hst_gaiadr2.toml.fits"), dir.file("rrlyrae_distance_priors.toml.fits"),
       dir.file("lmc_fundamental_cepheids.toml.fits")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("46 4 d ingest catalog 64 1"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("128 6 d ingest catalog 64 1"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("2464 13 d ingest catalog 64 1"), std::string::npos) << r.output;
}

// A small valid CSV and a config for it; cases below break one thing each.
const char* kGoodCsv =
    "id,P,plx,plx_err,V,V_err,ebv,mode\n"
    "S1,5.0,0.5,0.05,12.0,0.02,0.3,F\n"
    "S2,10.0,-0.1,0.08,11.0,0.02,0.2,1O\n"
    "S3,20.0,0.3,0.04,10.0,0.02,0.1,F\n";

std::string config_for(const std::string& input, const std::string& out,
                       const std::string& extra = "", const std::string& columns_extra = "") {
  return "[source]\npath = \"" + input + "\"\n" + extra +
         "\n[columns]\nid = \"id\"\nperiod = { column = \"P\", unit = \"d\" }\nparallax = \"plx\"\n"
         "parallax_err = \"plx_err\"\nebv = \"ebv\"\nmode = \"mode\"\npulsator_class = { value = "
         "\"classical_cepheid\" }\n" +
         columns_extra + "\n[bands.V]\nmag = \"V\"\nerr = \"V_err\"\n\n[output]\ncatalog = \"" +
         out + "\"\n";
}

TEST(IngestRows, EachBrokenRuleRejectsItsRowAndNamesIt) {
  test::TempDir dir;
  test::write_text(dir.file("in.csv"),
                   "id,P,plx,plx_err,V,V_err,ebv,mode\r\n"
                   "S1,5.0,0.5,0.05,12.0,0.02,0.3,F\r\n"       // line 2: good
                   "S1,6.0,0.5,0.05,12.0,0.02,0.3,F\r\n"       // duplicate_id
                   "S3,-2,0.5,0.05,12.0,0.02,0.3,F\r\n"        // period_nonpositive
                   "S4,5.0,0.5,0,12.0,0.02,0.3,F\r\n"          // parallax_error_nonpositive
                   "S5,5.0,abc,0.05,12.0,0.02,0.3,F\r\n"       // not_a_number
                   "S6,5.0,0.5,0.05,99.0,0.02,0.3,F\r\n"       // magnitude_out_of_range
                   "S7,5.0,0.5,0.05,12.0,0.02,11.5,F\r\n"      // ebv_out_of_range
                   "S8,5.0,0.5,0.05,12.0,0.02,0.3,3O\r\n"      // unknown_mode
                   "S9,,0.5,0.05,12.0,0.02,0.3,F\r\n"          // missing_required
                   "S10,5.0,inf,0.05,12.0,0.02,0.3,F\r\n"      // not_finite
                   "S11,5.0,0.5,0.05,12.0,,0.3,F\r\n"          // missing_error
                   "S12,5.0,0.5,0.05,12.0,-0.1,0.3,F\r\n"      // magnitude_error_nonpositive
                   "S13,5.0,-0.7,0.05,12.0,0.02,0.3,1O\r\n");  // good: negative parallaxes are data
  test::write_text(dir.file("c.toml"), config_for("in.csv", "out/cat.fits"));
  IngestOptions o = ingest_options_from_file(dir.file("c.toml"));
  o.text.missing = {};  // "inf" must be read as a number to be refused as not finite
  IngestResult r = run_ingest(o);
  ASSERT_EQ(r.catalog.rows(), 2u);
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kParallax).real[1], -0.7);
  EXPECT_EQ(r.catalog.column(col::kMode).text[1], "first_overtone");
  std::vector<std::pair<std::int64_t, std::string>> got;
  for (const auto& rej : r.rejected) got.emplace_back(rej.source_row, rej.rule);
  std::vector<std::pair<std::int64_t, std::string>> want = {
      {3, "duplicate_id"},   {4, "period_nonpositive"},          {5, "parallax_error_nonpositive"},
      {6, "not_a_number"},   {7, "magnitude_out_of_range"},      {8, "ebv_out_of_range"},
      {9, "unknown_mode"},   {10, "missing_required"},           {11, "not_finite"},
      {12, "missing_error"}, {13, "magnitude_error_nonpositive"}};
  EXPECT_EQ(got, want);
  EXPECT_EQ(r.rejected[0].message, "id 'S1' was already used at line 2");
  EXPECT_EQ(r.rejected[3].column, "plx");
}

TEST(IngestRows, ImplausibleValuesAreRefusedWithTheirRule) {
  // Issue 15: a parallax, period or [Fe/H] of 1e308 (or a period of 1e30 or 1e-300 d)
  // passed ingest and crashed the fit. Limits per quantity in [validate], defaults
  // documented in docs/file-formats.md; an id equal to an earlier one but for case is
  // warned about by default and refused when configured.
  test::TempDir dir;
  test::write_text(dir.file("in.csv"),
                   "id,P,plx,plx_err,V,V_err,ebv,mode,feh\n"
                   "S1,5.0,0.5,0.05,12.0,0.02,0.3,F,-0.1\n"     // line 2: good
                   "S2,5.0,1e308,0.05,12.0,0.02,0.3,F,-0.1\n"   // parallax_out_of_range
                   "S3,1e308,0.5,0.05,12.0,0.02,0.3,F,-0.1\n"   // period_out_of_range
                   "S4,1e30,0.5,0.05,12.0,0.02,0.3,F,-0.1\n"    // period_out_of_range
                   "S5,1e-300,0.5,0.05,12.0,0.02,0.3,F,-0.1\n"  // period_out_of_range
                   "S6,5.0,0.5,0.05,12.0,0.02,0.3,F,1e308\n"    // feh_out_of_range
                   "S7,5.0,0.5,500,12.0,0.02,0.3,F,-0.1\n"      // parallax_error_out_of_range
                   "S8,5.0,0.5,0.05,12.0,9.9,0.3,F,-0.1\n"      // magnitude_error_out_of_range
                   "S9,5.0,-1500,0.05,12.0,0.02,0.3,F,-0.1\n"   // parallax_out_of_range
                   "s1,0.5,0.7,0.05,12.0,0.02,0.3,F,-0.1\n");   // good: a variant of S1 (warned)
  test::write_text(dir.file("c.toml"), config_for("in.csv", "out/cat.fits", "", "feh = \"feh\"\n"));
  IngestOptions o = ingest_options_from_file(dir.file("c.toml"));
  EXPECT_EQ(o.parallax_abs_max, 1000.0);
  EXPECT_EQ(o.period_range.min, 0.05);
  EXPECT_EQ(o.period_range.max, 1000.0);
  IngestResult r = run_ingest(o);
  ASSERT_EQ(r.catalog.rows(), 2u);
  std::vector<std::pair<std::int64_t, std::string>> got;
  for (const auto& rej : r.rejected) got.emplace_back(rej.source_row, rej.rule);
  EXPECT_EQ(got,
            (std::vector<std::pair<std::int64_t, std::string>>{{3, "parallax_out_of_range"},
                                                               {4, "period_out_of_range"},
                                                               {5, "period_out_of_range"},
                                                               {6, "period_out_of_range"},
                                                               {7, "feh_out_of_range"},
                                                               {8, "parallax_error_out_of_range"},
                                                               {9, "magnitude_error_out_of_range"},
                                                               {10, "parallax_out_of_range"}}));
  EXPECT_EQ(r.rejected[0].column, "plx");
  EXPECT_EQ(r.rejected[1].message,
            "period 1e+308 d is outside the plausible [0.05, 1000] d for classical_cepheid "
            "([validate] period_range_d)");
  // Limits from the config: the class's own period range, a tighter parallax limit, and
  // id variants refused.
  test::write_text(dir.file("c.toml"),
                   config_for("in.csv", "out/cat.fits", "", "feh = \"feh\"\n") +
                       "\n[validate]\nparallax_max_mas = 0.6\nid_variants = \"refuse\"\n"
                       "[validate.class_period_range_d]\nclassical_cepheid = [1.0, 100.0]\n");
  r = run_ingest(ingest_options_from_file(dir.file("c.toml")));
  ASSERT_EQ(r.catalog.rows(), 1u);
  ASSERT_FALSE(r.rejected.empty());
  EXPECT_EQ(r.rejected.back().rule, "id_variant");
  EXPECT_EQ(r.rejected.back().source_row, 11);
  EXPECT_EQ(r.rejected.back().message,
            "id 's1' equals the id at line 2 but for letter case or spaces around it");
  // Config numbers must be finite, and ranges in order.
  for (const std::string bad :
       {"parallax_max_mas = nan", "feh_range = [1.0, -1.0]", "magnitude_error_max = -1",
        "id_variants = \"sometimes\"", "period_range_d = [0.0, 5.0]"}) {
    test::write_text(dir.file("c.toml"),
                     config_for("in.csv", "out/cat.fits") + "\n[validate]\n" + bad + "\n");
    try {
      run_ingest(ingest_options_from_file(dir.file("c.toml")));
      ADD_FAILURE() << bad << " was accepted";
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "config_value") << bad;
    }
  }
}

TEST(IngestRows, StarIdsMustBeUtf8) {
  // Issue 15: a non-UTF-8 byte in an id was an internal error later (JSON). Well-formed
  // sequences by RFC 3629, section 4 (Unicode Table 3-7): 2-, 3- and 4-byte forms are ids;
  // an overlong form, a surrogate, a cut sequence and a code point above U+10FFFF stop the
  // file with rule invalid_utf8 naming the line.
  test::TempDir dir;
  const std::string good =
      "id,P,plx,plx_err,V,V_err,ebv,mode\n"
      "S\xc3\xbc,5.0,0.5,0.05,12.0,0.02,0.3,F\n"          // U+00FC
      "\xe2\x98\x89,5.0,0.5,0.05,12.0,0.02,0.3,F\n"       // U+2609
      "\xf0\x9d\x9b\xbc,5.0,0.5,0.05,12.0,0.02,0.3,F\n";  // U+1D6FC
  test::write_text(dir.file("in.csv"), good);
  test::write_text(dir.file("c.toml"), config_for("in.csv", "out/cat.fits"));
  EXPECT_EQ(run_ingest(ingest_options_from_file(dir.file("c.toml"))).catalog.rows(), 3u);
  for (const std::string& bad : {std::string("\xc0\xaf"), std::string("\xed\xa0\x80"),
                                 std::string("X\xe2\x82"), std::string("\xf4\x90\x80\x80")}) {
    test::write_text(dir.file("in.csv"), good + bad + ",5.0,0.5,0.05,12.0,0.02,0.3,F\n");
    try {
      run_ingest(ingest_options_from_file(dir.file("c.toml")));
      ADD_FAILURE() << "an id of " << bad.size() << " bytes was accepted";
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "invalid_utf8");
      EXPECT_EQ(e.where().row, 5);
      EXPECT_EQ(e.where().column, "id");
    }
  }
}

TEST(IngestRows, NanInFitsIsMissingAndUnitsConvert) {
  test::TempDir dir;
  StarTable t;
  t.add_column("id", ColumnType::kText);
  t.add_column("P", ColumnType::kReal, "h");
  t.add_column("plx", ColumnType::kReal, "arcsec");
  t.add_column("plx_err", ColumnType::kReal, "arcsec");
  t.add_column("V", ColumnType::kReal, "mag");
  t.add_column("V_err", ColumnType::kReal, "mag");
  t.add_column("ebv", ColumnType::kReal, "mag");
  t.add_column("mode", ColumnType::kText);
  auto row = [&](const char* id, double p, double plx, double v) {
    t.column("id").push_text(id);
    t.column("P").push_real(p);
    t.column("plx").push_real(plx);
    t.column("plx_err").push_real(5e-5);
    t.column("V").push_real(v);
    t.column("V_err").push_real(0.01);
    t.column("ebv").push_real(0.1);
    t.column("mode").push_text("F");
  };
  row("A", 120.0, 5e-4, 12.0);
  row("B", std::nan(""), 5e-4, 12.0);
  write_fits_tables(dir.file("in.fits"), {{"STARS", &t}});
  // No unit in the config: the file's TUNIT (h, arcsec) is used.
  test::write_text(dir.file("c.toml"),
                   test::replaced(config_for("in.fits", "cat.fits", "hdu = \"STARS\"\n"),
                                  {{"{ column = \"P\", unit = \"d\" }", "\"P\""}}));
  IngestResult r = run_ingest(ingest_options_from_file(dir.file("c.toml")));
  ASSERT_EQ(r.catalog.rows(), 1u);
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kPeriod).real[0], 5.0);    // 120 h
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kParallax).real[0], 0.5);  // 5e-4 arcsec
  EXPECT_DOUBLE_EQ(r.catalog.column(col::kParallaxErr).real[0], 0.05);
  ASSERT_EQ(r.rejected.size(), 1u);
  EXPECT_EQ(r.rejected[0].rule, "missing_required");
  EXPECT_EQ(r.rejected[0].source_row, 2);
}

TEST(IngestRows, EveryColumnTypeConstantAndLogUnitMapsToItsValue) {
  // Hand-computed truth for each way a value reaches the catalog: a log10 period, numbers
  // in a text column (one not a number), an integer column, a constant, a band without a
  // mapped error, Gaia's astrometric bit masks, a text quantity and extras of every type,
  // in one group and in groups of two rows (the checks are made column by column per group).
  test::TempDir dir;
  StarTable t;
  t.add_column("id", ColumnType::kText);
  t.add_column("logP", ColumnType::kReal, "log_d");
  t.add_column("plx", ColumnType::kText);
  t.add_column("plx_err", ColumnType::kInteger, "uas");
  t.add_column("V", ColumnType::kReal, "mag");
  t.add_column("V_err", ColumnType::kReal, "mag");
  t.add_column("I", ColumnType::kReal, "mag");
  t.add_column("mode", ColumnType::kText);
  t.add_column("host", ColumnType::kText);
  t.add_column("aps", ColumnType::kInteger);
  t.add_column("flag", ColumnType::kBoolean);
  t.add_column("count", ColumnType::kInteger);
  t.add_column("note", ColumnType::kText);
  t.add_column("w", ColumnType::kReal);
  auto row = [&](const char* id, double logp, const char* plx, std::int64_t plx_err, double v,
                 double v_err, double i, std::int64_t aps) {
    t.column("id").push_text(id);
    t.column("logP").push_real(logp);
    t.column("plx").push_text(plx);
    t.column("plx_err").push_integer(plx_err);
    t.column("V").push_real(v);
    t.column("V_err").push_real(v_err);
    t.column("I").push_real(i);
    t.column("mode").push_text("F");
    t.column("host").push_text(std::string("H") + id);
    t.column("aps").push_integer(aps);
    t.column("flag").push_boolean(aps == 95);
    t.column("count").push_integer(aps + 1);
    t.column("note").push_text(std::string("n") + id);
    t.column("w").push_real(aps == 95 ? std::nan("") : 0.5 * static_cast<double>(aps));
  };
  const double nan = std::nan("");
  row("A", 1.0, "0.5", 50, 12.0, 0.02, 11.0, 31);  // kept: P 10 d, 5-parameter
  row("B", 0.5, "abc", 50, 12.0, 0.02, 11.0, 31);  // not_a_number (plx)
  row("C", 0.0, "-0.25", 40, nan, nan, 10.5, 95);  // kept: V missing, I without error
  row("D", 1.0, "0.5", 50, 12.0, 0.02, 11.0, 7);   // bad_astrometric_params
  row("E", 2.0, "0.1", 0, 12.0, 0.02, 11.0, 5);    // parallax_error_nonpositive
  write_fits_tables(dir.file("in.fits"), {{"STARS", &t}});
  test::write_text(
      dir.file("c.toml"),
      "[source]\npath = \"in.fits\"\nhdu = \"STARS\"\n\n[columns]\nid = \"id\"\n"
      "period = \"logP\"\nparallax = { column = \"plx\", unit = \"mas\" }\n"
      "parallax_err = \"plx_err\"\nebv = { value = 0.25 }\nmode = \"mode\"\n"
      "pulsator_class = { value = \"classical_cepheid\" }\ngroup = \"host\"\n"
      "astrometric_params = \"aps\"\n\n[bands.V]\nmag = \"V\"\nerr = \"V_err\"\n\n"
      "[bands.I]\nmag = \"I\"\n\n[extra]\nflag_copy = \"flag\"\ncount_copy = \"count\"\n"
      "note_copy = \"note\"\nw_copy = \"w\"\n\n[output]\ncatalog = \"cat.fits\"\n");
  IngestOptions o = ingest_options_from_file(dir.file("c.toml"));
  o.require_errors = false;  // band I has no error column
  for (int chunk : {1000, 2}) {
    o.chunk_rows = chunk;
    IngestResult r = run_ingest(o);
    const StarTable& c = r.catalog;
    ASSERT_EQ(c.rows(), 2u) << chunk;
    EXPECT_EQ(c.column(col::kId).text, (std::vector<std::string>{"A", "C"}));
    EXPECT_EQ(c.column(col::kSourceRow).integer, (std::vector<std::int64_t>{1, 3}));
    EXPECT_DOUBLE_EQ(c.column(col::kPeriod).real[0], 10.0);  // 10^1.0 d
    EXPECT_DOUBLE_EQ(c.column(col::kPeriod).real[1], 1.0);   // 10^0.0 d
    EXPECT_DOUBLE_EQ(c.column(col::kLogPeriod).real[0], 1.0);
    EXPECT_DOUBLE_EQ(c.column(col::kParallax).real[1], -0.25);
    EXPECT_DOUBLE_EQ(c.column(col::kParallaxErr).real[0], 0.05);  // 50 uas
    EXPECT_DOUBLE_EQ(c.column(col::kParallaxErr).real[1], 0.04);
    EXPECT_EQ(c.column("ebv").real, (std::vector<double>{0.25, 0.25}));
    EXPECT_EQ(c.column(col::kMode).text, (std::vector<std::string>{"fundamental", "fundamental"}));
    EXPECT_EQ(c.column("pulsator_class").text[1], "classical_cepheid");
    EXPECT_EQ(c.column("group").text, (std::vector<std::string>{"HA", "HC"}));
    EXPECT_EQ(c.column("astrometric_params").integer, (std::vector<std::int64_t>{5, 6}));
    const Column& v = c.column(magnitude_column("V"));
    const Column& v_err = c.column(magnitude_error_column("V"));
    EXPECT_EQ(v.null, (std::vector<std::uint8_t>{0, 1}));
    EXPECT_EQ(v_err.null, (std::vector<std::uint8_t>{0, 1}));  // no error without its magnitude
    EXPECT_DOUBLE_EQ(c.column(magnitude_column("I")).real[1], 10.5);
    EXPECT_EQ(c.column(magnitude_error_column("I")).null, (std::vector<std::uint8_t>{1, 1}));
    EXPECT_EQ(c.column("flag_copy").boolean, (std::vector<std::uint8_t>{0, 1}));
    EXPECT_EQ(c.column("count_copy").integer, (std::vector<std::int64_t>{32, 96}));
    EXPECT_EQ(c.column("note_copy").text, (std::vector<std::string>{"nA", "nC"}));
    EXPECT_DOUBLE_EQ(c.column("w_copy").real[0], 15.5);
    EXPECT_EQ(c.column("w_copy").null, (std::vector<std::uint8_t>{0, 1}));
    std::vector<std::pair<std::int64_t, std::string>> got;
    for (const auto& rej : r.rejected) got.emplace_back(rej.source_row, rej.rule);
    EXPECT_EQ(
        got,
        (std::vector<std::pair<std::int64_t, std::string>>{
            {2, "not_a_number"}, {4, "bad_astrometric_params"}, {5, "parallax_error_nonpositive"}}))
        << chunk;
    ASSERT_EQ(r.rejected.size(), 3u);
    EXPECT_EQ(r.rejected[0].message, "parallax: 'abc' is not a number");
    EXPECT_EQ(r.rejected[0].column, "plx");
    EXPECT_EQ(r.rejected[0].id, "B");
    EXPECT_EQ(r.rejected[1].column, "aps");
  }
}

// One whole-file failure: what to write, which rule and exit code to expect.
struct BadCase {
  const char* name;
  std::string config;  // config text ("" = none written)
  std::string input;   // input file content
  std::string input_name = "in.csv";
  std::string rule;  // expected [rule] in the message
  int exit_code = 2;
  std::string args;  // command-line args; default --config c.toml
};

// Test names in listings, not the struct's bytes.
void PrintTo(const BadCase& c, std::ostream* os) { *os << c.name; }

BadCase bad(const char* name, std::string config, std::string input, std::string input_name,
            std::string rule, int exit_code = 2, std::string args = "") {
  return BadCase{
      name,      std::move(config), std::move(input), std::move(input_name), std::move(rule),
      exit_code, std::move(args)};
}

std::vector<BadCase> bad_cases() {
  const std::string good = kGoodCsv;
  auto cfg = [](const std::string& extra = "", const std::string& cols = "") {
    return config_for("in.csv", "out/cat.fits", extra, cols);
  };
  std::string base = cfg();
  auto replace = [](std::string s, const std::string& from, const std::string& to) {
    auto p = s.find(from);
    if (p != std::string::npos) s.replace(p, from.size(), to);
    return s;
  };
  std::vector<BadCase> v;
  v.push_back(bad("config_missing", "", good, "in.csv", "unreadable_file"));
  v.push_back(bad("config_syntax", "[source\npath = 1\n", good, "in.csv", "config_syntax"));
  v.push_back(
      bad("unknown_key_typo", cfg("delimter = \"comma\"\n"), good, "in.csv", "unknown_config_key"));
  v.push_back(bad("unknown_quantity", cfg("", "paralax = \"plx\"\n"), good, "in.csv",
                  "unknown_config_key"));
  v.push_back(bad("unknown_section", base + "\n[fitt]\nloss = \"huber\"\n", good, "in.csv",
                  "unknown_config_key"));
  v.push_back(bad("no_source_table", replace(base, "[source]\npath = \"in.csv\"\n", ""), good,
                  "in.csv", "config_missing_key"));
  v.push_back(
      bad("no_id_mapping", replace(base, "id = \"id\"\n", ""), good, "in.csv", "config_value"));
  v.push_back(bad("no_mode_mapping", replace(base, "mode = \"mode\"\n", ""), good, "in.csv",
                  "config_value"));
  v.push_back(
      bad("bad_delimiter_name", cfg("delimiter = \"spaces\"\n"), good, "in.csv", "config_value"));
  v.push_back(bad("wrong_key_type", cfg("header = \"yes\"\n"), good, "in.csv", "config_value"));
  v.push_back(bad("hdu_on_text_source", cfg("hdu = 1\n"), good, "in.csv", "config_value"));
  v.push_back(bad("reversed_magnitude_range", base + "\n[validate]\nmagnitude_range = [30, -5]\n",
                  good, "in.csv", "config_value"));
  v.push_back(bad("bad_mode_alias", base + "\n[modes]\nX = \"fundamentl\"\n", good, "in.csv",
                  "config_value"));
  v.push_back(bad("bad_select_op", base + "\n[[select]]\ncolumn = \"P\"\nop = \"=>\"\nvalue = 1\n",
                  good, "in.csv", "config_value"));
  v.push_back(bad("no_bands", replace(base, "[bands.V]\nmag = \"V\"\nerr = \"V_err\"\n", ""), good,
                  "in.csv", "config_value"));
  v.push_back(bad("input_missing", replace(base, "in.csv", "nothere.csv"), good, "in.csv",
                  "unreadable_file"));
  v.push_back(bad("empty_file", base, "", "in.csv", "empty_file"));
  v.push_back(
      bad("header_only", base, "id,P,plx,plx_err,V,V_err,ebv,mode\n", "in.csv", "empty_file"));
  v.push_back(bad("missing_required_column", base,
                  "id,Q,plx,plx_err,V,V_err,ebv,mode\nS1,5,0.5,0.05,12,0.02,0.3,F\n", "in.csv",
                  "missing_column"));
  v.push_back(bad("field_count", base,
                  "id,P,plx,plx_err,V,V_err,ebv,mode\nS1,5,0.5,0.05,12,0.02,0.3\n", "in.csv",
                  "field_count"));
  v.push_back(bad("utf16_bom", base, std::string("\xFF\xFE", 2) + good, "in.csv", "encoding"));
  v.push_back(bad("nul_bytes", base, std::string("id,P\0\0\0", 7), "in.csv", "encoding"));
  v.push_back(bad("duplicate_header_column", base,
                  "id,P,plx,plx_err,V,V_err,ebv,mode,P\nS1,5,0.5,0.05,12,0.02,0.3,F,1\n", "in.csv",
                  "duplicate_column"));
  v.push_back(bad("unterminated_quote", base,
                  "id,P,plx,plx_err,V,V_err,ebv,mode\n\"S1,5,0.5,0.05,12,0.02,0.3,F\n", "in.csv",
                  "unterminated_quote"));
  v.push_back(bad("bad_unit", replace(base, "unit = \"d\"", "unit = \"fortnight\""), good, "in.csv",
                  "bad_unit"));
  v.push_back(bad("wrong_type_text_parallax", base,
                  "id,P,plx,plx_err,V,V_err,ebv,mode\nS1,5,high,0.05,12,0.02,0.3,F\nS2,6,low,0.05,"
                  "12,0.02,0.3,F\n",
                  "in.csv", "column_type"));
  v.push_back(bad("all_rows_rejected", base,
                  "id,P,plx,plx_err,V,V_err,ebv,mode\nS1,-5,0.5,0.05,12,0.02,0.3,F\nS2,0,0.5,0.05,"
                  "12,0.02,0.3,F\n",
                  "in.csv", "no_rows_left"));
  v.push_back(bad("select_unknown_column", base + "\n[[select]]\ncolumn = \"flag\"\nvalue = 0\n",
                  good, "in.csv", "missing_column"));
  v.push_back(bad("extra_unknown_column", base + "\n[extra]\nq = \"quality\"\n", good, "in.csv",
                  "missing_column"));
  v.push_back(bad("fits_not_fits", replace(base, "path = \"in.csv\"", "path = \"in.fits\""), good,
                  "in.fits", "fits_read"));
  v.push_back(bad("output_under_a_file", replace(base, "out/cat.fits", "in.csv/cat.fits"), good,
                  "in.csv", "write_failed"));
  v.push_back(bad("cli_no_config", "", good, "in.csv", "", 2, " "));
  v.push_back(
      bad("cli_unknown_option", base, good, "in.csv", "", 2, "--config c.toml --frobnicate"));
  return v;
}

class IngestBadInput : public ::testing::TestWithParam<BadCase> {};

TEST_P(IngestBadInput, StopsWithItsRuleAndExitCodeAndWritesNothing) {
  const BadCase& c = GetParam();
  test::TempDir dir;
  if (!c.config.empty()) test::write_text(dir.file("c.toml"), c.config);
  test::write_text(dir.file(c.input_name), c.input);
  std::string args = c.args.empty() ? "--config " + dir.file("c.toml") : c.args;
  if (args.find("c.toml") != std::string::npos && c.args.size())
    args = "--config " + dir.file("c.toml") + args.substr(args.find("c.toml") + 6);
  auto r = test::run_stage("ingest", args);
  EXPECT_EQ(r.exit_code, c.exit_code) << r.output;
  if (!c.rule.empty()) {
    EXPECT_NE(r.output.find("[" + c.rule + "]"), std::string::npos) << r.output;
    // The message names the file it is about (the config or the input).
    EXPECT_TRUE(r.output.find("c.toml") != std::string::npos ||
                r.output.find(c.input_name) != std::string::npos ||
                r.output.find("nothere.csv") != std::string::npos)
        << r.output;
  }
  EXPECT_FALSE(test::file_exists(dir.file("out"))) << "an output folder was left behind";
  for (const auto& e : fs::recursive_directory_iterator(dir.path()))
    EXPECT_EQ(e.path().string().find(".part"), std::string::npos) << e.path();
}

INSTANTIATE_TEST_SUITE_P(Cases, IngestBadInput, ::testing::ValuesIn(bad_cases()),
                         [](const auto& case_info) { return std::string(case_info.param.name); });

TEST(IngestBadInput, FitsCasesNameTheirRule) {
  test::TempDir dir;
  StarTable t;
  t.add_column("id", ColumnType::kText);
  t.add_column("P", ColumnType::kReal, "d");
  t.add_column("plx", ColumnType::kReal, "arcsec");
  t.add_column("plx_err", ColumnType::kReal, "mas");
  t.add_column("V", ColumnType::kReal, "mag");
  t.add_column("V_err", ColumnType::kReal, "mag");
  t.add_column("ebv", ColumnType::kReal, "mag");
  t.add_column("ok", ColumnType::kBoolean);
  t.add_column("mode", ColumnType::kText);
  for (int i = 0; i < 40; ++i) {
    t.column("id").push_text("S" + std::to_string(i));
    t.column("P").push_real(5.0 + i);
    t.column("plx").push_real(5e-4);
    t.column("plx_err").push_real(0.05);
    t.column("V").push_real(12.0);
    t.column("V_err").push_real(0.02);
    t.column("ebv").push_real(0.2);
    t.column("ok").push_boolean(true);
    t.column("mode").push_text("F");
  }
  write_fits_tables(dir.file("in.fits"), {{"STARS", &t}});
  auto run = [&](const std::string& name, const std::string& config) {
    test::write_text(dir.file(name + ".toml"), config);
    return test::run_stage("ingest", "--config " + dir.file(name + ".toml"));
  };
  // The file says arcsec, the config says mas: refuse rather than guess.
  auto r = run(
      "conflict",
      test::replaced(config_for("in.fits", "out/a.fits"),
                     {{"parallax = \"plx\"", "parallax = { column = \"plx\", unit = \"mas\" }"}}));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[unit_conflict]"), std::string::npos) << r.output;
  // A logical column mapped to E(B-V).
  r = run("logical",
          test::replaced(config_for("in.fits", "out/b.fits"), {{"ebv = \"ebv\"", "ebv = \"ok\""}}));
  EXPECT_NE(r.output.find("[column_type]"), std::string::npos) << r.output;
  // No such HDU.
  r = run("hdu", config_for("in.fits", "out/c.fits", "hdu = \"PHOTOMETRY\"\n"));
  EXPECT_NE(r.output.find("[fits_hdu]"), std::string::npos) << r.output;
  // Truncated file.
  std::string bytes = test::read_text(dir.file("in.fits"));
  test::write_text(dir.file("cut.fits"), bytes.substr(0, bytes.size() - 1500));
  r = run("cut", config_for("cut.fits", "out/d.fits"));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[fits_read]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("truncated"), std::string::npos) << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
}

TEST(IngestChunks, AFitsCatalogReadInGroupsOfRowsGivesTheSameCatalog) {
  // Groups of 7 rows (120 stars: 18 groups, the last short) against one read of the whole.
  IngestOptions o = ingest_options_from_file(test::source_file("config/demo/ingest.toml"));
  IngestResult whole = run_ingest(o);
  o.chunk_rows = 7;
  IngestResult chunked = run_ingest(o);
  whole.catalog.header().clear();
  chunked.catalog.header().clear();
  EXPECT_EQ(format_csv_table(chunked.catalog), format_csv_table(whole.catalog));
  EXPECT_EQ(chunked.rejected.size(), whole.rejected.size());
  EXPECT_EQ(chunked.rows_read,
            170u);  // 120 field calibrators, 12 cluster members, 38 in anchor galaxies
}

TEST(IngestChunks, AStreamedCatalogFileEqualsTheOneWrittenWhole) {
  // The demo catalog with one star repeated in a later group (a duplicate id across groups)
  // and groups of 7 rows on both cores: streaming to the file (what rungcal-ingest does
  // with a FITS input) must give the same rows and rejects as checking the whole table.
  test::TempDir dir;
  IngestOptions o = ingest_options_from_file(test::source_file("config/demo/ingest.toml"));
  StarTable in = read_fits_table(o.input_path, o.hdu).table;
  StarTable doubled = in.select_rows({0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 3});
  for (std::size_t r = 16; r < in.rows(); ++r) doubled.append_rows(in.select_rows({r}));
  write_fits_tables(dir.file("in.fits"), {{o.hdu.name.empty() ? "STARS" : o.hdu.name, &doubled}});
  o.input_path = dir.file("in.fits");
  o.chunk_rows = 7;
  o.catalog_path = dir.file("whole.fits");
  o.rejects_csv_path = dir.file("whole.csv");
  o.lightcurves.summary_path.clear();
  IngestResult whole = run_ingest(o);  // the catalog kept in memory, written whole
  write_ingest_products(whole, o);
  o.catalog_path = dir.file("streamed.fits");
  o.rejects_csv_path = dir.file("streamed.csv");
  IngestResult streamed = ingest_catalog_file(o);
  EXPECT_EQ(streamed.stars, whole.catalog.rows());
  EXPECT_EQ(streamed.catalog.rows(), 0u);  // the rows are in the file only
  ASSERT_EQ(streamed.rejected.size(), whole.rejected.size());
  bool duplicate = false;
  for (const auto& r : streamed.rejected)
    duplicate |= r.rule == "duplicate_id" && r.source_row == 16;
  EXPECT_TRUE(duplicate);
  for (const char* hdu : {"CATALOG", "REJECTS"}) {
    StarTable a = read_fits_table(dir.file("whole.fits"), {hdu, 0}).table;
    StarTable b = read_fits_table(dir.file("streamed.fits"), {hdu, 0}).table;
    a.header().clear();
    b.header().clear();
    EXPECT_EQ(format_csv_table(b), format_csv_table(a)) << hdu;
  }
}

TEST(IngestChunks, AStreamedTextCatalogEqualsOneReadAsASingleGroup) {
  // 40 simulated stars in a CSV with comments, blank lines and CRLF, one id repeated four
  // groups later and one bad parallax: groups of 7 lines on both cores must give the same
  // catalog and rejects (with the same line numbers) as the whole file in one group.
  test::TempDir dir;
  std::string csv = "# simulated stars (invented)\r\nid,P,plx,plx_err,V,V_err,ebv,mode\r\n";
  for (int i = 0; i < 40; ++i) {
    if (i == 20) csv += "\r\n# a comment between groups\r\n";
    const std::string id = i == 33 ? "S05" : fmt::format("S{:02d}", i);  // a duplicate of S05
    const std::string plx = i == 12 ? "n/a" : fmt::format("{:.3f}", 0.2 + 0.01 * i);
    csv += fmt::format("{},{:.2f},{},0.05,{:.2f},0.02,0.3,{}\r\n", id, 3.0 + 0.5 * i, plx,
                       12.0 - 0.05 * i, i % 3 ? "F" : "1O");
  }
  test::write_text(dir.file("in.csv"), csv);
  test::write_text(dir.file("c.toml"), config_for("in.csv", "cat.fits", "chunk_rows = 7\n"));
  IngestOptions o = ingest_options_from_file(dir.file("c.toml"));
  IngestResult streamed = ingest_catalog_file(o);
  o.chunk_rows = 1000;
  o.catalog_path = dir.file("whole.fits");
  o.rejects_csv_path = dir.file("whole_rejects.csv");
  IngestResult whole = ingest_catalog_file(o);
  EXPECT_EQ(streamed.rows_read, 40u);
  EXPECT_EQ(streamed.stars, 38u);
  std::vector<std::pair<std::int64_t, std::string>> got;
  for (const auto& r : streamed.rejected) got.emplace_back(r.source_row, r.rule);
  EXPECT_EQ(got, (std::vector<std::pair<std::int64_t, std::string>>{{15, "not_a_number"},
                                                                    {38, "duplicate_id"}}));
  EXPECT_EQ(streamed.rejected[1].message, "id 'S05' was already used at line 8");
  for (const char* hdu : {"CATALOG", "REJECTS"}) {
    StarTable a = read_fits_table(dir.file("whole.fits"), {hdu, 0}).table;
    StarTable b = read_fits_table(dir.file("cat.fits"), {hdu, 0}).table;
    a.header().clear();
    b.header().clear();
    EXPECT_EQ(format_csv_table(b), format_csv_table(a)) << hdu;
  }
  // A broken line in a later group stops the file, and nothing is written.
  test::write_text(dir.file("in.csv"), csv + "S99,5.0,0.5\r\n");
  o.chunk_rows = 7;
  o.catalog_path = dir.file("out/broken.fits");
  o.rejects_csv_path.clear();
  try {
    ingest_catalog_file(o);
    ADD_FAILURE() << "a line with 3 fields was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "field_count");
    EXPECT_EQ(e.where().row, 45);
  }
  EXPECT_FALSE(test::file_exists(dir.file("out/broken.fits")));
  EXPECT_FALSE(test::file_exists(dir.file("out/broken_rejects.csv")));
}

// NAXIS1 (bytes per row) of the first binary table in a FITS file, read from the header text.
long first_table_row_bytes(const std::string& path) {
  const std::string bytes = test::read_text(path);
  const auto at = bytes.find("NAXIS1  =", bytes.find("XTENSION= 'BINTABLE'"));
  return at == std::string::npos ? 0 : std::stol(bytes.substr(at + 10, 20));
}

TEST(IngestChunks, KeptRowsFillingWholeFitsBlocksAreWritten) {
  // Issue 15: when rows were refused and the kept rows filled an exact multiple of 2880
  // bytes, ingest stopped with "[write_failed] closing table CATALOG: tried to move past end
  // of file". Every kept count from 1 to 150 (the catalog rows are the same width, so
  // several counts fill whole blocks), text and FITS input, with a refused row and without.
  test::TempDir dir;
  IngestOptions o = ingest_options_from_file(test::source_file("config/demo/ingest_targets.toml"));
  o.chunk_rows = 64;
  o.rejects_csv_path = dir.file("rejects.csv");
  const std::string header =
      "id,host,period_d,ebv,ebv_err,feh,mag_V,mag_err_V,mag_I,mag_err_I,mag_H,mag_err_H\n";
  auto line = [](std::size_t i, bool refused) {
    return fmt::format(
        "VEY-{:04d},Veyra Spiral,{:.5f},0.121,0.020,-0.10,24.393,0.082,23.519,0.067,"
        "22.176,0.078\n",
        i, refused ? -1.0 : 10.0 + 0.01 * static_cast<double>(i));
  };
  std::size_t whole_blocks = 0;
  for (std::size_t kept = 1; kept <= 150; ++kept) {
    for (bool with_reject : {false, true}) {
      std::string csv = header;
      for (std::size_t i = 0; i < kept; ++i) {
        if (with_reject && i == kept / 2) csv += line(900 + i, true);  // period -1: refused
        csv += line(i, false);
      }
      test::write_text(dir.file("in.csv"), csv);
      for (bool fits : {false, true}) {
        if (fits) {
          StarTable in = read_text_table(dir.file("in.csv"), o.text).table;
          write_fits_tables(dir.file("in.fits"), {{"STARS", &in}});
        }
        o.input_path = dir.file(fits ? "in.fits" : "in.csv");
        o.input_is_fits = fits;
        o.catalog_path = dir.file("cat.fits");
        IngestResult r = ingest_catalog_file(o);
        ASSERT_EQ(r.stars, kept) << (fits ? "FITS" : "text") << ", refused row: " << with_reject;
        ASSERT_EQ(r.rejected.size(), with_reject ? 1u : 0u);
        if (with_reject) {
          EXPECT_EQ(r.rejected[0].rule, "period_nonpositive");
        }
        const StarTable back = read_fits_table(o.catalog_path, {"CATALOG", 0}).table;
        ASSERT_EQ(back.rows(), kept);
        // The last star's period as in the input line.
        EXPECT_DOUBLE_EQ(back.column(col::kPeriod).real[kept - 1],
                         10.0 + 0.01 * static_cast<double>(kept - 1));
        const long row_bytes = first_table_row_bytes(o.catalog_path);
        ASSERT_GT(row_bytes, 0);
        if (with_reject && fits && kept * static_cast<std::size_t>(row_bytes) % 2880 == 0)
          ++whole_blocks;
      }
    }
  }
  EXPECT_GE(whole_blocks, 2u);  // the sweep did reach the counts that failed
}

}  // namespace
}  // namespace rungcal
