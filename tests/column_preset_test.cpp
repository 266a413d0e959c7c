// SPDX-License-Identifier: MIT
// Tests of the [columns] preset (lib/rungcal/ingest/column_preset.cpp): real Gaia archive
// files (tests/data/README.md names their source) ingest without a column map, explicit
// keys override the preset, and the ecliptic latitude computed from RA and Dec agrees with
// the archive's own and with astropy's.
#include <fmt/format.h>
#include <gtest/gtest.h>

#include <cmath>
#include <string>
#include <vector>

#include "rungcal/astrometry/astrometry.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

IngestOptions options_for(const test::TempDir& dir, const std::string& toml) {
  test::write_text(dir.file("ingest.toml"), toml);
  return ingest_options_from_file(dir.file("ingest.toml"));
}

// The constant columns a gaia_source download lacks: these test files hold no periods.
constexpr const char* kConstants = R"(
period = { value = 5.0 }
mode = { value = "fundamental" }
pulsator_class = { value = "other" }

[bands.G]
mag = "phot_g_mean_mag"
err = 0.003
)";

std::string gaia_config(const std::string& data_file, const std::string& extra_columns = "") {
  return "[source]\npath = \"" + test::source_file("tests/data/" + data_file) +
         "\"\n\n[columns]\npreset = \"gaia_dr3\"\n" + extra_columns + kConstants;
}

TEST(GaiaDr3Preset, ReadsTheArchivesVOTableWithoutAColumnMap) {
  test::TempDir dir;
  const IngestResult r = run_ingest(options_for(dir, gaia_config("gaia_dr3_source_two_stars.vot")));
  ASSERT_EQ(r.catalog.rows(), 2u);
  // The values the Gaia archive gives for these two sources (the file's own TDs).
  const StarTable& c = r.catalog;
  EXPECT_EQ(c.column(col::kId).text,
            (std::vector<std::string>{"4583627001381815936", "5348723816842275584"}));
  EXPECT_DOUBLE_EQ(c.column(col::kParallax).real[0], 2.3034086430210925);
  EXPECT_NEAR(c.column(col::kParallaxErr).real[1], 0.04194041, 1e-8);  // float32 in the file
  EXPECT_NEAR(c.column("gaia_g_mag").real[0], 7.0120187, 1e-6);
  EXPECT_NEAR(c.column("nu_eff_um").real[1], 1.1782945, 1e-6);
  EXPECT_TRUE(c.column("pseudocolour_um").is_null(0));  // a 5-parameter solution has none
  EXPECT_DOUBLE_EQ(c.column("ecl_lat_deg").real[0], 49.928747601434345);  // taken, not computed
  EXPECT_EQ(c.column("astrometric_params").integer, (std::vector<std::int64_t>{5, 5}));  // 31
  EXPECT_NEAR(c.column("ruwe").real[1], 1.03767, 1e-6);
  EXPECT_DOUBLE_EQ(c.column("ra_deg").real[1], 171.55081173633306);
}

TEST(GaiaDr3Preset, AMappedKeyOverridesThePreset) {
  test::TempDir dir;
  const IngestResult r = run_ingest(
      options_for(dir, gaia_config("gaia_dr3_source_two_stars.vot", "id = \"designation\"\n")));
  ASSERT_EQ(r.catalog.rows(), 2u);
  EXPECT_EQ(r.catalog.column(col::kId).text[0], "Gaia DR3 4583627001381815936");
}

TEST(GaiaDr3Preset, ReadsTheArchivesEcsvWithItsNulls) {
  test::TempDir dir;
  const IngestResult r =
      run_ingest(options_for(dir, gaia_config("gaia_dr3_cone_five_sources.ecsv")));
  ASSERT_EQ(r.catalog.rows(), 5u);
  const StarTable& c = r.catalog;
  // Two of the five sources have a 2-parameter solution: no parallax and no RUWE (NaN in the
  // archive's file).
  EXPECT_NEAR(c.column(col::kParallax).real[0], 0.05755191318641077, 1e-15);
  EXPECT_TRUE(c.column(col::kParallax).is_null(1));
  EXPECT_TRUE(c.column("ruwe").is_null(3));
  EXPECT_NEAR(c.column("ruwe").real[4], 1.0514544, 1e-6);
  EXPECT_DOUBLE_EQ(c.column("ecl_lat_deg").real[2], -36.773896878533364);
}

TEST(GaiaDr3Preset, ComputesTheEclipticLatitudeAsTheArchiveDoes) {
  // The Gaia archive's ecl_lat beside its ra and dec, in both files: the mean ecliptic of
  // J2000 with the frame bias agrees with it to about 2 mas (the archive's own rounding of
  // the transformation is not documented in the file; 1e-6 deg = 3.6 mas).
  for (const char* f : {"gaia_dr3_source_two_stars.vot", "gaia_dr3_cone_five_sources.ecsv"}) {
    test::TempDir dir;
    const IngestResult r = run_ingest(options_for(dir, gaia_config(f)));
    const StarTable& c = r.catalog;
    for (std::size_t i = 0; i < c.rows(); ++i)
      EXPECT_NEAR(ecliptic_latitude_deg(c.column("ra_deg").real[i], c.column("dec_deg").real[i]),
                  c.column("ecl_lat_deg").real[i], 1e-6)
          << f << " row " << i;
  }
}

TEST(GaiaDr3Preset, ComputesTheEclipticLatitudeWhenTheFileHasNoneAsAstropyDoes) {
  // The Riess et al. 2018 (ApJ 861, 126) table carries Gaia DR2's ra, dec, parallax,
  // parallax_error, phot_g_mean_mag and astrometric_params_solved under the archive's
  // names, but no ecl_lat: the preset computes it. Reference: astropy's
  // BarycentricMeanEcliptic (equinox J2000) from the same ra and dec.
  test::TempDir dir;
  const std::string toml =
      "[source]\npath = \"" + test::reference_file("mw_cepheids_hst_gaiadr2.txt") +
      "\"\ndelimiter = \"multispace\"\nheader_prefix = \"#\"\nmissing = [\"xxx\"]\n\n"
      "[columns]\npreset = \"gaia_dr3\"\nid = \"Name\"\n"
      "period = { column = \"LogPeriod\", unit = \"log_d\" }\n"
      "mode = { value = \"fundamental\" }\npulsator_class = { value = \"classical_cepheid\" }\n"
      "\n[bands.F160W]\nmag = \"F160W\"\nerr = \"F160W_error\"\n";
  const IngestResult r = run_ingest(options_for(dir, toml));
  ASSERT_EQ(r.catalog.rows(), 50u);
  const StarTable& c = r.catalog;
  ASSERT_TRUE(c.has("ecl_lat_deg"));
  EXPECT_EQ(c.column("astrometric_params").integer[0], 5);  // Gaia's 31
  std::vector<std::string> args;
  for (std::size_t i = 0; i < c.rows(); ++i) {
    args.push_back(fmt::format("{:.17g}", c.column("ra_deg").real[i]));
    args.push_back(fmt::format("{:.17g}", c.column("dec_deg").real[i]));
  }
  auto py = test::run_python(R"(
import sys
try:
    import astropy.units as u
    from astropy.coordinates import SkyCoord, BarycentricMeanEcliptic
except ImportError:
    print("no astropy"); sys.exit(0)
v = [float(x) for x in sys.argv[1:]]
c = SkyCoord(ra=v[0::2] * u.deg, dec=v[1::2] * u.deg, frame="icrs")
for b in c.transform_to(BarycentricMeanEcliptic()).lat.deg:
    print(repr(float(b)))
)",
                             args);
  ASSERT_EQ(py.exit_code, 0) << py.output;
  if (py.output.find("no astropy") != std::string::npos)
    GTEST_SKIP() << "python3-astropy is not installed";
  const std::vector<double> beta = test::parse_numbers(py.output);
  ASSERT_EQ(beta.size(), c.rows()) << py.output;
  // 1e-7 deg = 0.36 mas: astropy's transformation holds precession terms that vanish at
  // J2000; what is left is rounding.
  for (std::size_t i = 0; i < c.rows(); ++i)
    EXPECT_NEAR(c.column("ecl_lat_deg").real[i], beta[i], 1e-7) << c.column(col::kId).text[i];
}

TEST(GaiaDr3Preset, AFileWithoutSourceIdNeedsAnIdMap) {
  test::TempDir dir;
  test::write_text(dir.file("stars.csv"), "name,parallax,parallax_error,G\nV1,0.5,0.02,9.0\n");
  try {
    run_ingest(
        options_for(dir, "[source]\npath = \"stars.csv\"\n\n[columns]\npreset = \"gaia_dr3\"\n" +
                             std::string(kConstants)));
    ADD_FAILURE() << "a file without source_id was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "missing_column");
    EXPECT_NE(std::string(e.what()).find("source_id"), std::string::npos) << e.what();
  }
}

TEST(GaiaDr3Preset, AnUnknownPresetStopsNamingTheChoices) {
  test::TempDir dir;
  test::write_text(
      dir.file("ingest.toml"),
      "[source]\npath = \"x.csv\"\n[columns]\npreset = \"gaia_dr2\"\n" + std::string(kConstants));
  const test::CommandResult r = test::run_stage("ingest", "--config " + dir.file("ingest.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("gaia_dr3"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("config_value"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace rungcal
