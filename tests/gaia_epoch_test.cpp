// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/lightcurve/gaia_epoch*: Gaia DR3 epoch photometry, in arrays (one row
// per source, the epochs in array columns) as FITS, VOTable and ECSV, and flat (one epoch per
// row) as CSV and VOTable, written by astropy (Debian python3-astropy), expanded into light
// curves; times against astropy.time, magnitudes against numpy. The sources here are invented
// (their source_ids are made up) with sinusoidal light curves of known period: known truth,
// as for the other simulations. A real archive file of the flat form (a DataLink download,
// VOTable BINARY2) is read in lightcurve_real_data_test.cpp; no small real file of the array
// form was found in public repositories' test data.
#include <gtest/gtest.h>

#include <fmt/format.h>

#include <cmath>
#include <map>
#include <string>
#include <vector>

#include "rungcal/core/error.hpp"
#include "rungcal/lightcurve/gaia_epoch.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// Two invented sources in the columns of Gaia DR3 documentation, section 20.7.1: a
// 5.3671-day Cepheid-like and a 0.58731-day RR Lyrae-like sinusoid, 70 and 90 transits over
// Gaia times 1700-2750 d. Flagged epochs carry a wrong magnitude (5.0) so that keeping one
// would show. Written as gaia.ecsv, gaia.vot (TABLEDATA), gaia_binary2.vot (BINARY2, the
// flags boolean, as the Gaia archive's DataLink sends them), gaia.fits (variable-length
// arrays, 1PD/1PE/1PL), flux.ecsv (fluxes only, no magnitudes), each through astropy.
constexpr const char* kWriteGaiaFiles = R"py(
import sys, numpy as np
from astropy.table import Table
from astropy.io import fits
out = sys.argv[1]
rng = np.random.default_rng(20261203)
zp = {"g": 25.6874, "bp": 25.3385, "rp": 24.7479}
sources = [(4101234567890123457, 5.3671, 70, 11.2), (4107654321098765439, 0.58731, 90, 14.1)]
rows = {k: [] for k in ["source_id", "g_transit_time", "g_transit_mag", "g_transit_flux",
        "g_transit_flux_over_error", "bp_obs_time", "bp_mag", "bp_flux", "bp_flux_over_error",
        "rp_obs_time", "rp_mag", "rp_flux", "rp_flux_over_error", "variability_flag_g_reject",
        "variability_flag_bp_reject", "variability_flag_rp_reject", "photometry_flag_rp_reject"]}
for sid, period, n, mean in sources:
    t = np.sort(rng.uniform(1700.0, 2750.0, n))
    rows["source_id"].append(sid)
    for band, shift, tcol in [("g", 0.0, "g_transit_time"), ("bp", 0.4, "bp_obs_time"), ("rp", -0.6, "rp_obs_time")]:
        tb = t + (0.0 if band == "g" else 1e-5)
        snr = rng.uniform(300.0, 900.0, n)
        mag = mean + shift + 0.3 * np.sin(2 * np.pi * tb / period) + rng.normal(0, 1.0857 / snr)
        flux = 10 ** (-0.4 * (mag - zp[band]))
        rows[tcol].append(tb)
        pre = "g_transit_" if band == "g" else band + "_"
        rows[pre + "mag"].append(mag)
        rows[pre + "flux"].append(flux)
        rows[pre + "flux_over_error"].append(snr.astype(np.float32))
        rows["variability_flag_" + band + "_reject"].append(np.zeros(n, dtype=bool))
    rows["photometry_flag_rp_reject"].append(np.zeros(n, dtype=bool))
# The first source: three G epochs rejected by variability processing, two BP fluxes and
# magnitudes missing, one RP transit rejected by photometry processing.
for k in (3, 17, 40):
    rows["variability_flag_g_reject"][0][k] = True
    rows["g_transit_mag"][0][k] = 5.0
    rows["g_transit_flux"][0][k] = 10 ** (-0.4 * (5.0 - zp["g"]))
for k in (5, 6):
    rows["bp_flux"][0][k] = np.nan
    rows["bp_mag"][0][k] = np.nan
rows["photometry_flag_rp_reject"][0][11] = True
rows["rp_mag"][0][11] = 5.0
def table(names):
    t = Table()
    for name in names:
        if name == "source_id":
            t[name] = np.array(rows[name], dtype=np.int64)
        else:
            col = np.empty(len(sources), dtype=object)
            for i, v in enumerate(rows[name]):
                col[i] = v
            t[name] = col
    return t
names = list(rows)
table(names).write(out + "/gaia.ecsv", overwrite=True)
table(names).write(out + "/gaia.vot", format="votable", overwrite=True)
table([n for n in names if not n.endswith("mag")]).write(out + "/flux.ecsv", overwrite=True)
# BINARY2 through astropy.io.votable's tree: its Table writer makes bool arrays "bit", and
# variable-length arrays need a masked array per cell.
from astropy.io.votable import tree as vo
vot = vo.VOTableFile()
vot.resources.append(vo.Resource())
vt = (getattr(vo, "TableElement", None) or vo.Table)(vot)
vot.resources[0].tables.append(vt)
def vo_type(name):
    if name == "source_id":
        return "long", None
    if "flag" in name:
        return "boolean", "*"
    return ("float" if name.endswith("over_error") else "double"), "*"
for name in names:
    vt.fields.append(vo.Field(vot, name=name, datatype=vo_type(name)[0], arraysize=vo_type(name)[1]))
vt.create_arrays(len(sources))
numpy_type = {"boolean": bool, "float": np.float32, "double": np.float64}
for name in names:
    for i, v in enumerate(rows[name]):
        if name == "source_id":
            vt.array[name][i] = v
            continue
        x = np.asarray(v, dtype=numpy_type[vo_type(name)[0]])
        vt.array.data[name][i] = np.ma.array(x, mask=np.zeros(x.shape, dtype=bool))
vot.to_xml(out + "/gaia_binary2.vot", tabledata_format="binary2")
cols = []
for name in names:
    if name == "source_id":
        cols.append(fits.Column(name=name, format="K", array=np.array(rows[name], dtype=np.int64)))
        continue
    a = np.empty(len(sources), dtype=object)
    for i, v in enumerate(rows[name]):
        a[i] = v
    kind = "L" if "flag" in name else ("E" if name.endswith("over_error") else "D")
    cols.append(fits.Column(name=name, format="P" + kind + "()", array=a))
fits.BinTableHDU.from_columns(cols).writeto(out + "/gaia.fits", overwrite=True)
# The same epochs in the flat form (one epoch per row; columns of table 1 of the Gaia DR3
# epoch-photometry paper, A&A 2023, aa44204-22), transit by transit with the bands
# interleaved, as flat.csv and flat.vot. transit_id and solution_id are invented.
flat = {k: [] for k in ["source_id", "transit_id", "band", "time", "mag", "flux",
        "flux_error", "flux_over_error", "rejected_by_photometry",
        "rejected_by_variability", "other_flags", "solution_id"]}
for i, (sid, period, n, mean) in enumerate(sources):
    for k in range(n):
        for band, tcol in [("G", "g_transit_time"), ("BP", "bp_obs_time"), ("RP", "rp_obs_time")]:
            pre = "g_transit_" if band == "G" else band.lower() + "_"
            snr = rows[pre + "flux_over_error"][i][k]
            flat["source_id"].append(sid)
            flat["transit_id"].append(17000000000000000 + 1000 * i + k)
            flat["band"].append(band)
            flat["time"].append(rows[tcol][i][k])
            flat["mag"].append(rows[pre + "mag"][i][k])
            flat["flux"].append(rows[pre + "flux"][i][k])
            flat["flux_error"].append(rows[pre + "flux"][i][k] / snr)
            flat["flux_over_error"].append(snr)
            phot = "photometry_flag_" + band.lower() + "_reject"
            flat["rejected_by_photometry"].append(bool(phot in rows and rows[phot][i][k]))
            flat["rejected_by_variability"].append(
                bool(rows["variability_flag_" + band.lower() + "_reject"][i][k]))
            flat["other_flags"].append(0)
            flat["solution_id"].append(375316653866487564)
ft = Table(flat)
ft["flux_over_error"] = ft["flux_over_error"].astype(np.float32)
ft.write(out + "/flat.csv", format="ascii.csv", overwrite=True)
ft.write(out + "/flat.vot", format="votable", overwrite=True)
ft.write(out + "/flat.ecsv", format="ascii.ecsv", overwrite=True)
ft.write(out + "/flat.fits", format="fits", overwrite=True)
)py";

std::string write_gaia_files(const test::TempDir& dir) {
  const auto r = test::run_python(kWriteGaiaFiles, {dir.path()});
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return r.output;
}

std::string gaia_config(const std::string& input, const std::string& extra_source = "") {
  return "bands_file = \"" + test::source_file("config/bands.toml") + "\"\n[source]\npath = \"" +
         input + "\"\nlayout = \"gaia_epoch\"\n" + extra_source +
         "[search]\nmin_period = 0.3\nmax_period = 20\nharmonics = 1\n[output]\npath = "
         "\"out/lc.fits\"\n";
}

SourceTable expand(const std::string& path, std::vector<GaiaDroppedEpochs>& dropped,
                   const std::vector<std::string>& bands = {"G", "BP", "RP"}) {
  TableSourceSpec spec;
  spec.path = path;
  spec.is_fits = has_fits_extension(path);
  spec.is_votable = path.ends_with(".vot");
  std::vector<InputRecord> inputs;
  return read_gaia_epochs(spec, bands, {"star", "time", "band", "mag", "err"}, inputs, dropped);
}

TEST(GaiaEpoch, TimesAreBjdInTcbAsAstropyCountsThem) {
  // Gaia DR3 documentation, section 20.7.1: times are "Barycentric JD in TCB - 2455197.5",
  // the origin 2010-01-01T00:00:00 TCB. astropy.time gives the calendar date of the origin
  // and the Julian dates of three Gaia times; the TCB - TDB offset (about 19 s) is
  // astropy's too.
  const auto r = test::run_python(R"(
from astropy.time import Time
print(Time(2455197.5, format="jd", scale="tcb").isot == "2010-01-01T00:00:00.000")
for t in (0.0, 1712.375, 2731.90625):
    x = Time(2455197.5 + t, format="jd", scale="tcb")
    print(repr(x.jd), repr((x.jd - x.tdb.jd) * 86400.0))
)");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(r.output.substr(0, 4), "True");
  const std::vector<double> v = test::parse_numbers(r.output.substr(5));
  ASSERT_EQ(v.size(), 6u);
  const double times[] = {0.0, 1712.375, 2731.90625};
  for (int i = 0; i < 3; ++i) {
    EXPECT_DOUBLE_EQ(bjd_from_gaia_time(times[i]), v[2 * i]) << times[i];
    // TCB runs 18-20 s ahead of TDB over the DR3 epochs: nothing a period can feel.
    if (i > 0) {
      EXPECT_NEAR(v[2 * i + 1], 19.0, 1.0);
    }
  }
}

TEST(GaiaEpoch, MagnitudesAndErrorsFromFluxesAsNumpyComputesThem) {
  // m = ZP - 2.5 log10(flux) with the Vega zero points of Riello et al. 2021 (A&A 649, A3,
  // table 3; memory, corroborated), sigma_m = 2.5 / ln(10) / (flux / sigma_flux).
  const auto r = test::run_python(R"(
import numpy as np
for zp, f in ((25.6874, 123456.7), (25.3385, 8.25e4), (24.7479, 3.1e5)):
    print(repr(zp - 2.5 * np.log10(f)))
print(repr(2.5 / np.log(10) / 437.5))
)");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const std::vector<double> v = test::parse_numbers(r.output);
  ASSERT_EQ(v.size(), 4u);
  EXPECT_NEAR(magnitude_from_flux(123456.7, kGaiaZeroPointG), v[0], 1e-12);
  EXPECT_NEAR(magnitude_from_flux(8.25e4, kGaiaZeroPointBp), v[1], 1e-12);
  EXPECT_NEAR(magnitude_from_flux(3.1e5, kGaiaZeroPointRp), v[2], 1e-12);
  EXPECT_NEAR(magnitude_error_from_flux_over_error(437.5), v[3], 1e-15);
  EXPECT_TRUE(std::isnan(magnitude_from_flux(-3.0, kGaiaZeroPointG)));
  EXPECT_TRUE(std::isnan(magnitude_error_from_flux_over_error(0.0)));
}

// The same light-curve points, in the same order: the star, band, time and magnitude to the
// bit (astropy writes each double in full, repr), the error to float precision
// (flux_over_error is a float in the DR3 data model: FITS keeps its binary value, each text
// form writes its shortest decimal).
void expect_same_light_curves(const SourceTable& other, const SourceTable& reference) {
  const StarTable& o = other.table;
  const StarTable& e = reference.table;
  ASSERT_EQ(o.rows(), e.rows());
  for (std::size_t r = 0; r < e.rows(); ++r) {
    EXPECT_EQ(o.column("star").text[r], e.column("star").text[r]) << r;
    EXPECT_EQ(o.column("band").text[r], e.column("band").text[r]) << r;
    EXPECT_EQ(o.column("time").real[r], e.column("time").real[r]) << r;
    EXPECT_EQ(o.column("mag").real[r], e.column("mag").real[r]) << r;
    EXPECT_NEAR(o.column("err").real[r], e.column("err").real[r], 1e-7 * e.column("err").real[r])
        << r;
  }
}

TEST(GaiaEpoch, FitsVotableAndEcsvGiveTheSameLightCurves) {
  test::TempDir dir;
  write_gaia_files(dir);
  std::vector<GaiaDroppedEpochs> de, dv, df, db;
  const SourceTable e = expand(dir.file("gaia.ecsv"), de);
  const SourceTable v = expand(dir.file("gaia.vot"), dv);
  const SourceTable f = expand(dir.file("gaia.fits"), df);
  const SourceTable b = expand(dir.file("gaia_binary2.vot"), db);
  // 3 x 70 + 3 x 90 epochs, less 3 flagged G, 2 missing BP and 1 flagged RP.
  ASSERT_EQ(e.table.rows(), 3u * 70 + 3u * 90 - 6);
  for (const SourceTable* other : {&v, &f, &b}) expect_same_light_curves(*other, e);
  EXPECT_EQ(b.row_label, "row");
  EXPECT_EQ(b.source_rows.back(), 2);  // the second source's row in the stream
  EXPECT_EQ(e.table.column("star").text[0], "4101234567890123457");
  EXPECT_EQ(e.row_label, "line");
  EXPECT_EQ(f.row_label, "row");
  EXPECT_EQ(f.source_rows.back(), 2);  // the second source's FITS row
  for (const auto* d : {&de, &dv, &df, &db}) {
    ASSERT_EQ(d->size(), 6u);  // 2 sources x 3 bands
    EXPECT_EQ((*d)[0].band, "G");
    EXPECT_EQ((*d)[0].flagged, 3);
    EXPECT_EQ((*d)[1].missing, 2);
    EXPECT_EQ((*d)[2].flagged, 1);
    EXPECT_EQ((*d)[3].flagged + (*d)[3].missing, 0);
  }
}

TEST(GaiaEpoch, TheFlatFormGivesTheLightCurvesOfTheArrayForm) {
  // The same invented epochs written by astropy once per source in arrays (gaia.ecsv) and
  // once per epoch (flat.csv, flat.vot, flat.ecsv, flat.fits): the same points, and the
  // same epochs dropped and counted per source and band.
  test::TempDir dir;
  write_gaia_files(dir);
  std::vector<GaiaDroppedEpochs> da, dc, dv, de, df;
  const SourceTable a = expand(dir.file("gaia.ecsv"), da);
  const SourceTable c = expand(dir.file("flat.csv"), dc);
  const SourceTable v = expand(dir.file("flat.vot"), dv);
  const SourceTable e = expand(dir.file("flat.ecsv"), de);
  const SourceTable f = expand(dir.file("flat.fits"), df);
  ASSERT_EQ(a.table.rows(), 3u * 70 + 3u * 90 - 6);
  for (const SourceTable* flat : {&c, &v, &e, &f}) expect_same_light_curves(*flat, a);
  for (const auto* d : {&dc, &dv, &de, &df}) ASSERT_EQ(d->size(), da.size());
  for (const auto* d : {&dc, &dv, &de, &df})
    for (std::size_t i = 0; i < da.size(); ++i) {
      EXPECT_EQ((*d)[i].star, da[i].star) << i;
      EXPECT_EQ((*d)[i].band, da[i].band) << i;
      EXPECT_EQ((*d)[i].flagged, da[i].flagged) << i;
      EXPECT_EQ((*d)[i].missing, da[i].missing) << i;
    }
  EXPECT_EQ(dc[0].flagged, 3);  // three G epochs rejected by variability processing
  EXPECT_EQ(dc[1].missing, 2);  // two BP epochs without flux or magnitude
  EXPECT_EQ(dc[2].flagged, 1);  // one RP transit rejected by photometry processing
  // Each epoch keeps its own line (the header is line 1): the first source's first G epoch
  // is on line 2 of the CSV, its first BP epoch on line 3.
  EXPECT_EQ(c.row_label, "line");
  EXPECT_EQ(c.source_rows[0], 2);
  EXPECT_EQ(dc[1].source_row, 2);  // the source's first line
}

TEST(GaiaEpoch, TheFlatFormSkipsTheRowsOfBandsNotAskedFor) {
  test::TempDir dir;
  write_gaia_files(dir);
  std::vector<GaiaDroppedEpochs> d;
  const SourceTable g = expand(dir.file("flat.csv"), d, {"G"});
  ASSERT_EQ(g.table.rows(), 70u + 90u - 3u);  // the G epochs less the three flagged
  for (const std::string& band : g.table.column("band").text) EXPECT_EQ(band, "G");
  ASSERT_EQ(d.size(), 2u);  // one per source, G only
  EXPECT_EQ(d[0].flagged, 3);
}

// The light-curve stage's SUMMARY from two runs: every column alike.
void expect_same_summary(const StarTable& f, const StarTable& a) {
  ASSERT_EQ(f.rows(), a.rows());
  ASSERT_EQ(f.columns(), a.columns());
  for (std::size_t k = 0; k < a.columns(); ++k) {
    const Column& ca = a.column(k);
    const Column& cf = f.column(ca.name);
    for (std::size_t r = 0; r < a.rows(); ++r) {
      if (ca.type == ColumnType::kReal && std::isnan(ca.real[r]))  // e.g. R21 of one harmonic
        EXPECT_TRUE(std::isnan(cf.real[r])) << ca.name << " " << r;
      else if (ca.type == ColumnType::kReal)  // errors through float flux_over_error: 1e-7
        EXPECT_NEAR(cf.real[r], ca.real[r], 1e-6 * std::max(1.0, std::abs(ca.real[r])))
            << ca.name << " " << r;
      else
        EXPECT_EQ(cf.to_string(r), ca.to_string(r)) << ca.name << " " << r;
    }
  }
}

TEST(GaiaEpoch, TheStageGivesTheSameSummaryFromTheFlatForm) {
  test::TempDir dir;
  write_gaia_files(dir);
  test::write_text(dir.file("arrays.toml"), gaia_config("gaia.fits"));
  test::write_text(dir.file("flat.toml"),
                   test::replaced(gaia_config("flat.csv"), {{"out/lc.fits", "flat/lc.fits"}}));
  const auto ra = test::run_stage("lightcurve", "--config " + dir.file("arrays.toml"));
  ASSERT_EQ(ra.exit_code, 0) << ra.output;
  const auto rf = test::run_stage("lightcurve", "--verbose --config " + dir.file("flat.toml"));
  ASSERT_EQ(rf.exit_code, 0) << rf.output;
  EXPECT_NE(rf.output.find("4 dropped by rejection flags, 2 with a missing value"),
            std::string::npos)
      << rf.output;
  EXPECT_NE(rf.output.find("4101234567890123457 G: 3 epochs dropped (3 flagged, 0 with a "
                           "missing value)"),
            std::string::npos)
      << rf.output;
  const StarTable a = read_fits_table(dir.file("out/lc.fits"), {"SUMMARY", 0}).table;
  const StarTable f = read_fits_table(dir.file("flat/lc.fits"), {"SUMMARY", 0}).table;
  expect_same_summary(f, a);
  EXPECT_EQ(f.column("flagged_G").integer, (std::vector<std::int64_t>{3, 0}));
  EXPECT_EQ(f.column("missing_BP").integer, (std::vector<std::int64_t>{2, 0}));
  EXPECT_EQ(f.column("flagged_RP").integer, (std::vector<std::int64_t>{1, 0}));
}

TEST(GaiaEpoch, TheStageReadsABinary2VotableAsTheArchiveSendsIt) {
  // The same epochs in a BINARY2 VOTable (astropy.io.votable) and in FITS: the same SUMMARY
  // and the periods the light curves were made with.
  test::TempDir dir;
  write_gaia_files(dir);
  test::write_text(dir.file("fits.toml"), gaia_config("gaia.fits"));
  test::write_text(dir.file("b2.toml"), test::replaced(gaia_config("gaia_binary2.vot"),
                                                       {{"out/lc.fits", "b2/lc.fits"}}));
  const auto rf = test::run_stage("lightcurve", "--config " + dir.file("fits.toml"));
  ASSERT_EQ(rf.exit_code, 0) << rf.output;
  const auto rb = test::run_stage("lightcurve", "--config " + dir.file("b2.toml"));
  ASSERT_EQ(rb.exit_code, 0) << rb.output;
  const StarTable f = read_fits_table(dir.file("out/lc.fits"), {"SUMMARY", 0}).table;
  const StarTable b = read_fits_table(dir.file("b2/lc.fits"), {"SUMMARY", 0}).table;
  expect_same_summary(b, f);
  const std::map<std::string, double> truth = {{"4101234567890123457", 5.3671},
                                               {"4107654321098765439", 0.58731}};
  for (std::size_t r = 0; r < b.rows(); ++r) {
    const double period = truth.at(b.column("id").text[r]);
    EXPECT_NEAR(b.column("period_d").real[r], period, 2e-5 * period);  // known truth
  }
  EXPECT_EQ(b.column("flagged_G").integer, (std::vector<std::int64_t>{3, 0}));
  EXPECT_EQ(b.column("missing_BP").integer, (std::vector<std::int64_t>{2, 0}));
}

TEST(GaiaEpoch, ATruncatedBinary2StreamStopsTheStageNamingRowAndColumn) {
  // gaia_binary2.vot with its stream cut 100 bytes short (decoded and encoded again with
  // Python's base64): the second source's last arrays end early.
  test::TempDir dir;
  write_gaia_files(dir);
  const auto cut = test::run_python(R"py(
import base64, re, sys
path = sys.argv[1]
text = open(path).read()
m = re.search(r"(<STREAM[^>]*>)(.*?)(</STREAM>)", text, re.S)
short = base64.b64encode(base64.b64decode(m.group(2))[:-100]).decode()
open(path, "w").write(text[:m.start(2)] + short + text[m.end(2):])
)py",
                                    {dir.file("gaia_binary2.vot")});
  ASSERT_EQ(cut.exit_code, 0) << cut.output;
  test::write_text(dir.file("lc.toml"), gaia_config("gaia_binary2.vot"));
  const auto r = test::run_stage("lightcurve", "--config " + dir.file("lc.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("gaia_binary2.vot:row 2: column '"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("[votable_binary]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("truncated"), std::string::npos) << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
}

TEST(GaiaEpoch, FluxesWithoutMagnitudesGiveTheSameMagnitudes) {
  // The writer made its fluxes from the magnitudes with the same zero points: through
  // log10 and back the magnitudes agree to rounding.
  test::TempDir dir;
  write_gaia_files(dir);
  std::vector<GaiaDroppedEpochs> dm, df;
  const SourceTable m = expand(dir.file("gaia.ecsv"), dm);
  const SourceTable f = expand(dir.file("flux.ecsv"), df);
  ASSERT_EQ(f.table.rows(), m.table.rows());
  for (std::size_t r = 0; r < m.table.rows(); ++r)
    EXPECT_NEAR(f.table.column("mag").real[r], m.table.column("mag").real[r], 1e-9) << r;
}

TEST(GaiaEpoch, TheStageRecoversThePeriodsAndRecordsTheDroppedEpochs) {
  test::TempDir dir;
  write_gaia_files(dir);
  test::write_text(dir.file("lc.toml"), gaia_config("gaia.fits"));
  const auto run = test::run_stage("lightcurve", "--verbose --config " + dir.file("lc.toml"));
  ASSERT_EQ(run.exit_code, 0) << run.output;
  // The log says what was dropped, in all and per source and band.
  EXPECT_NE(run.output.find("4 dropped by rejection flags, 2 with a missing value"),
            std::string::npos)
      << run.output;
  EXPECT_NE(run.output.find("4101234567890123457 BP: 2 epochs dropped (0 flagged, 2 with a "
                            "missing value)"),
            std::string::npos)
      << run.output;
  const SourceTable s = read_fits_table(dir.file("out/lc.fits"), {"SUMMARY", 0});
  const StarTable& t = s.table;
  ASSERT_EQ(t.rows(), 2u);
  // The periods the light curves were made with (known truth), to the precision about 60
  // transits over 1050 days allow.
  const std::map<std::string, double> truth = {{"4101234567890123457", 5.3671},
                                               {"4107654321098765439", 0.58731}};
  for (std::size_t r = 0; r < 2; ++r) {
    const std::string id = t.column("id").text[r];
    EXPECT_NEAR(t.column("period_d").real[r], truth.at(id), 2e-5 * truth.at(id)) << id;
    EXPECT_TRUE(t.column("usable").boolean[r]) << id;
    EXPECT_NEAR(t.column("t_ref").real[r], 2455197.5 + 2225.0, 100.0) << id;  // BJD, not Gaia time
  }
  EXPECT_EQ(t.column("flagged_G").integer, (std::vector<std::int64_t>{3, 0}));
  EXPECT_EQ(t.column("missing_BP").integer, (std::vector<std::int64_t>{2, 0}));
  EXPECT_EQ(t.column("flagged_RP").integer, (std::vector<std::int64_t>{1, 0}));
  EXPECT_EQ(t.column("n_G").integer, (std::vector<std::int64_t>{67, 90}));
  ASSERT_NE(t.keyword("RGTIMESC"), nullptr);
  EXPECT_EQ(std::get<std::string>(t.keyword("RGTIMESC")->value), "bjd_tcb");
}

struct GaiaBadCase {
  const char* name;
  std::string python_edit;  // applied to the ECSV text the writer made
  std::string extra_source;
  std::string rule;
  std::string names;  // what the message must name besides the rule
};

void PrintTo(const GaiaBadCase& c, std::ostream* os) { *os << c.name; }

std::vector<GaiaBadCase> gaia_bad_cases() {
  return {
      // One G magnitude fewer than G times in the second source.
      {"ArraysOfUnequalLength", "shorten('g_transit_mag')", "", "array_length",
       "column 'g_transit_mag'"},
      {"MissingArrayColumn", "drop('bp_obs_time')", "", "missing_column", "bp_obs_time"},
      {"AColumnThatIsNotAnArray", "scalar('rp_obs_time')", "", "not_an_array", "rp_obs_time"},
      {"MissingArrayColumnOfTheOneBandAskedFor", "drop('bp_obs_time')", "bands = [\"BP\"]\n",
       "missing_column", "bp_obs_time"},
      {"UnknownBand", "", "bands = [\"V\"]\n", "config_value", "source.bands"},
      {"TimeScaleOtherThanTcb", "", "time_scale = \"bjd_tdb\"\n", "config_value",
       "source.time_scale"},
  };
}

// Edits the ECSV file with astropy: drop(name) removes a column, scalar(name) makes it one
// value per row, shorten(name) takes the last element off the second source's array and
// prints that source's line number.
constexpr const char* kEditEcsv = R"(
import sys
from astropy.table import Table
path, edit = sys.argv[1], sys.argv[2]
t = Table.read(path, format="ascii.ecsv")
def drop(name): t.remove_column(name)
def scalar(name): t[name] = [float(v[0]) for v in t[name]]
def shorten(name):
    t[name][1] = t[name][1][:-1]
if edit:
    exec(edit)
    t.write(path, format="ascii.ecsv", overwrite=True)
lines = open(path).read().split("\n")
print(1 + [i for i, l in enumerate(lines) if l and not l.startswith("#")][2])
)";

// Writes the Gaia files, edits `file` with `editor`, runs the stage on it and checks that it
// stops with exit code 2 and the case's rule, names what the case says and the file (or the
// config, for a config rule), and writes nothing. Returns what the editor printed.
std::string expect_stop_on_edited(const GaiaBadCase& c, const char* editor, const std::string& file,
                                  std::string& stage_output) {
  test::TempDir dir;
  write_gaia_files(dir);
  const auto edit = test::run_python(editor, {dir.file(file), c.python_edit});
  EXPECT_EQ(edit.exit_code, 0) << edit.output;
  test::write_text(dir.file("lc.toml"), gaia_config(file, c.extra_source));
  const auto r = test::run_stage("lightcurve", "--config " + dir.file("lc.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[" + c.rule + "]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find(c.names), std::string::npos) << r.output;
  EXPECT_TRUE(r.output.find(file) != std::string::npos ||
              r.output.find("lc.toml") != std::string::npos)
      << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
  stage_output = r.output;
  return edit.output;
}

class GaiaEpochBadInput : public ::testing::TestWithParam<GaiaBadCase> {};

TEST_P(GaiaEpochBadInput, StopsWithItsRuleAndExitCode2AndWritesNothing) {
  const GaiaBadCase& c = GetParam();
  std::string output;
  const std::string edited = expect_stop_on_edited(c, kEditEcsv, "gaia.ecsv", output);
  if (c.rule == "array_length") {  // the second source's line, as the editor counted it
    EXPECT_NE(output.find("line " + test::replaced(edited, {{"\n", ""}})), std::string::npos)
        << output;
  }
}

INSTANTIATE_TEST_SUITE_P(Cases, GaiaEpochBadInput, ::testing::ValuesIn(gaia_bad_cases()),
                         [](const auto& case_info) { return std::string(case_info.param.name); });

std::vector<GaiaBadCase> gaia_flat_bad_cases() {
  // Lines of flat.csv: 1 the header, 2 the first source's first G epoch.
  return {
      {"MissingTimeColumn", "drop('time')", "", "missing_column", "column 'time'"},
      {"NeitherMagnitudeNorFlux", "drop('mag'); drop('flux')", "", "missing_column",
       "column 'flux'"},
      {"UnknownBandValue", "t['band'][3] = 'V'", "", "unknown_band",
       "line 5: column 'band': [unknown_band] \"V\" is not a Gaia band"},
      {"FlagThatIsNoFlag",
       "t['rejected_by_variability'] = t['rejected_by_variability'].astype(str); "
       "t['rejected_by_variability'][6] = 'maybe'",
       "", "not_a_flag", "line 8: column 'rejected_by_variability'"},
      {"TimeThatIsNoNumber", "t['time'] = t['time'].astype('U24'); t['time'][2] = 'soon'", "",
       "not_a_number", "line 4: column 'time'"},
  };
}

// Edits flat.csv with astropy: drop(name) removes a column; other edits change cells.
constexpr const char* kEditFlatCsv = R"(
import sys
from astropy.table import Table
path, edit = sys.argv[1], sys.argv[2]
t = Table.read(path, format="ascii.csv")
def drop(name): t.remove_column(name)
exec(edit)
t.write(path, format="ascii.csv", overwrite=True)
)";

class GaiaEpochFlatBadInput : public ::testing::TestWithParam<GaiaBadCase> {};

TEST_P(GaiaEpochFlatBadInput, StopsWithItsRuleAndExitCode2AndWritesNothing) {
  std::string output;
  expect_stop_on_edited(GetParam(), kEditFlatCsv, "flat.csv", output);
}

INSTANTIATE_TEST_SUITE_P(Cases, GaiaEpochFlatBadInput, ::testing::ValuesIn(gaia_flat_bad_cases()),
                         [](const auto& case_info) { return std::string(case_info.param.name); });

}  // namespace
}  // namespace rungcal
