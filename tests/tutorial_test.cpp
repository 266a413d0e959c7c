// SPDX-License-Identifier: MIT
// Tests of docs/tutorial.md: its survey route runs as written, from a folder of per-star,
// per-band light-curve files and a star list without periods or magnitudes to a published
// calibration. The files are the tutorial's own code blocks; the data are the demo's invented
// Halden Peak stars (sample_data/lightcurves.csv and calibrators.fits) laid out as a survey
// publishes them, and the checks compare with the truth they were simulated with
// (sample_data/truth.json).
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <map>
#include <numbers>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include "rungcal/astrometry/astrometry.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/lightcurve/gaia_epoch.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// A section's fenced blocks: each ```toml block whose first line is "# <path>" (a file to
// write, relative to the tutorial's working folder's parent), and every line of its ```sh
// blocks (the commands, run in that folder).
struct TutorialBlocks {
  std::map<std::string, std::string> files;
  std::vector<std::string> commands;
};

TutorialBlocks tutorial_blocks(const std::string& section) {
  TutorialBlocks out;
  std::istringstream in(section);
  std::string line, fence, body;
  while (std::getline(in, line)) {
    if (fence.empty()) {
      if (line.rfind("```", 0) == 0) fence = line.substr(3), body.clear();
      continue;
    }
    if (line != "```") {
      body += line + "\n";
      continue;
    }
    if (fence == "toml" && body.rfind("# ", 0) == 0)
      out.files[body.substr(2, body.find('\n') - 2)] = body;
    if (fence == "sh") {
      std::istringstream cmds(body);
      for (std::string c; std::getline(cmds, c);)
        if (!c.empty()) out.commands.push_back(c);
    }
    fence.clear();
  }
  return out;
}

std::vector<std::string> split(const std::string& line, char sep) {
  std::vector<std::string> out;
  std::istringstream in(line);
  for (std::string field; std::getline(in, field, sep);) out.push_back(field);
  return out;
}

// The demo's V and I epochs as a survey publishes them: phot/<band>/<star>.dat, headerless
// "HJD - 2450000, magnitude, error" (the demo's times are BJD; the layout, not the time scale,
// is what this test is about). Returns the stars written.
std::set<std::string> write_light_curve_files(const std::string& folder) {
  std::map<std::string, std::string> files;  // path -> content
  std::istringstream in(test::read_text(test::source_file("sample_data/lightcurves.csv")));
  std::string line;
  std::getline(in, line);  // star,time_bjd_tdb,band,mag,mag_err
  std::set<std::string> stars;
  while (std::getline(in, line)) {
    const auto f = split(line, ',');
    if (f.size() != 5 || (f[2] != "V" && f[2] != "I")) continue;
    files["phot/" + f[2] + "/" + f[0] + ".dat"] +=
        fmt::format("{:.5f} {} {}\n", std::stod(f[1]) - 2450000.0, f[3], f[4]);
    stars.insert(f[0]);
  }
  for (const auto& [path, text] : files) {
    const std::filesystem::path file = std::filesystem::path(folder) / path;
    std::filesystem::create_directories(file.parent_path());
    test::write_text(file.string(), text);
  }
  return stars;
}

// The star list of the stars with light curves: ids, modes, positions, parallaxes, RUWE and
// [Fe/H]; no period, no magnitude, no E(B-V).
void write_star_list(const std::string& path, const std::set<std::string>& stars) {
  const StarTable t =
      read_fits_table(test::source_file("sample_data/calibrators.fits"), {"STARS", 0}).table;
  std::string csv = "id,mode,ra_deg,dec_deg,plx,plx_err,ruwe,feh,feh_err\n";
  for (std::size_t r = 0; r < t.rows(); ++r) {
    const std::string id = t.column("STAR").to_string(r);
    if (!stars.count(id)) continue;
    csv += id + "," + t.column("MODE").to_string(r);
    for (const char* c : {"RA", "DEC", "PLX", "PLX_ERR", "RUWE", "FEH", "FEH_ERR"})
      csv += "," + t.column(c).to_string(r);
    csv += "\n";
  }
  test::write_text(path, csv);
}

const nlohmann::json& parameter(const nlohmann::json& relation, const std::string& name) {
  for (const auto& p : relation.at("parameters"))
    if (p.at("name") == name) return p;
  throw std::runtime_error("no parameter " + name);
}

// Runs a tutorial's commands in its folder, the stages from this build, quietly; each must
// succeed.
::testing::AssertionResult run_commands(const std::string& folder,
                                        const std::vector<std::string>& commands) {
  for (const auto& command : commands) {
    auto run = test::run_command("cd " + test::shell_quote(folder) +
                                 " && PATH=" + test::shell_quote(RUNGCAL_BIN_DIR) + ":\"$PATH\" " +
                                 command + " -q");
    if (run.exit_code != 0)
      return ::testing::AssertionFailure() << command << " exited " << run.exit_code << "\n"
                                           << run.output;
  }
  return ::testing::AssertionSuccess();
}

// Each parameter within three of the fit's own errors of its truth.
void expect_within_three_errors(const nlohmann::json& relation,
                                const std::map<std::string, double>& truth) {
  for (const auto& [name, value] : truth) {
    const nlohmann::json& p = parameter(relation, name);
    const double error = p.at("error").get<double>();
    EXPECT_GT(error, 0) << name;
    EXPECT_LT(std::abs(p.at("value").get<double>() - value), 3 * error)
        << name << " = " << p.at("value") << " +- " << error << ", truth " << value;
  }
}

TEST(Tutorial, SurveyFolderToCalibration) {
  const TutorialBlocks blocks = tutorial_blocks(
      test::doc_section("tutorial.md", "From a folder of survey light curves to a calibration"));
  ASSERT_EQ(blocks.files.size(), 4u) << "the survey route's four configs";
  ASSERT_EQ(blocks.commands.size(), 6u);
  test::TempDir dir;
  const std::string survey = dir.file("survey");
  const std::set<std::string> stars = write_light_curve_files(survey);
  ASSERT_EQ(stars.size(), 100u);
  write_star_list(survey + "/stars.csv", stars);
  test::write_text(survey + "/bands.toml", test::read_text(test::source_file("config/bands.toml")));
  for (const auto& [path, text] : blocks.files) test::write_text(dir.file(path), text);

  ASSERT_TRUE(run_commands(survey, blocks.commands));

  // Every star's period came from its light curve: the survey's list has none.
  const StarTable cat = read_fits_table(survey + "/out/catalog.fits", {"CATALOG", 0}).table;
  EXPECT_GE(cat.rows(), 95u);
  const auto& origin = cat.column("period_origin").text;
  EXPECT_TRUE(std::all_of(origin.begin(), origin.end(),
                          [](const std::string& o) { return o == "lightcurve"; }));

  // The relation against the simulation's truth (sample_data/truth.json, wesenheit.W_VI;
  // offset -0.010 mas after the zero point -0.020): within three of the fit's own errors.
  const nlohmann::json truth =
      nlohmann::json::parse(test::read_text(test::source_file("sample_data/truth.json")));
  const nlohmann::json fit = nlohmann::json::parse(test::read_text(survey + "/out/fit.json"));
  const nlohmann::json& rel = fit.at("relations").at(0);
  EXPECT_EQ(rel.at("name"), "W_VI");
  EXPECT_GE(rel.at("statistics").at("n_used").get<int>(), 90);
  const std::map<std::string, double> expected = {
      {"alpha", truth["wesenheit"]["W_VI"]["alpha"]},
      {"beta", truth["wesenheit"]["W_VI"]["beta"]},
      {"gamma", truth["wesenheit"]["W_VI"]["gamma"]},
      {"parallax_offset_mas", truth["parallax_offset_mas"]}};
  expect_within_three_errors(rel, expected);

  // Published as version 1, and the report wrote its relation table.
  const nlohmann::json cal = nlohmann::json::parse(
      test::read_text(survey + "/out/store/survey-wvi/latest/calibration.json"));
  EXPECT_EQ(cal.at("version"), 1);
  for (const char* product :
       {"relations.tex", "stars_W_VI.csv", "pl_W_VI.pdf", "residuals_W_VI.png"})
    EXPECT_TRUE(test::file_exists(survey + "/out/report/" + product)) << product;
}

// The Gaia route's simulation truth (invented, for this test only): W_G = alpha + beta (log P
// - 1) + N(0, sigma_int) in absolute magnitude, parallaxes with the Lindegren et al. (2021)
// zero point and a residual offset added.
constexpr double kAlphaWG = -5.95, kBetaWG = -3.25, kSigmaWG = 0.08, kOffsetWG = -0.010;
constexpr int kGaiaStars = 120;

// Invented Gaia Cepheids (the source ids are made up), one CSV line each for the Python writer
// below: what gaia_source holds and what the light curves are drawn from (G, BP, RP intensity
// means, no reddening). Distances uniform in a disk's area from 1 to 6 kpc, periods 2.8-32 d,
// 5-parameter solutions with nu_eff from the colour, parallax errors growing with G.
std::string gaia_mock_stars() {
  const ZeroPointTable z5 =
      ZeroPointTable::from_file(test::reference_file("parallax_zeropoint_5p.txt"));
  Random rng(20261204);
  std::string csv = "source_id,ra,dec,ecl_lat,parallax,parallax_error,nu_eff,period,g,bp,rp\n";
  for (int i = 0; i < kGaiaStars; ++i) {
    const double log_p = rng.uniform(0.45, 1.5);
    const double d_kpc = std::sqrt(1.0 + 35.0 * rng.uniform());
    const double mu = 5.0 * std::log10(d_kpc * 100.0);
    const double w = kAlphaWG + kBetaWG * (log_p - 1.0) + kSigmaWG * rng.normal() + mu;
    const double colour = 0.9 + 0.25 * (log_p - 1.0);  // BP - RP
    const double g = w + 1.90 * colour;
    const double ra = rng.uniform(0.0, 360.0);
    const double dec = std::asin(rng.uniform(-1.0, 1.0)) * 180.0 / std::numbers::pi;
    const double beta = ecliptic_latitude_deg(ra, dec);
    const double nu_eff = 1.60 - 0.1 * colour;
    const double plx_err = 0.012 + 0.003 * std::max(0.0, g - 6.0);
    const double plx =
        1.0 / d_kpc + z5.zero_point_mas(g, nu_eff, beta) + kOffsetWG + plx_err * rng.normal();
    csv += fmt::format("{},{:.9f},{:.9f},{:.9f},{:.6f},{:.6f},{:.4f},{:.7f},{:.5f},{:.5f},{:.5f}\n",
                       4100000000000000000ULL + 104729ULL * static_cast<unsigned>(i), ra, dec, beta,
                       plx, plx_err, nu_eff, std::pow(10.0, log_p), g, g + 0.4 * colour,
                       g - 0.6 * colour);
  }
  return csv;
}

// Writes gaia/gaia_source.vot (TABLEDATA, the archive's column names and units) and one
// EPOCH_PHOTOMETRY file per source as the archive's DataLink names and writes them (flat form,
// VOTable BINARY2): 45 transits over Gaia times 1700-2750 d, three-harmonic Cepheid-like curves
// whose intensity means are the given ones, fluxes from the stage's Gaia zero points (passed in),
// and one epoch per source rejected by the variability processing with a wrong magnitude.
constexpr const char* kWriteGaiaDownload = R"py(
import sys, csv, numpy as np
from astropy.table import Table
from astropy.io.votable import from_table
stars_csv, out = sys.argv[1], sys.argv[2]
rows = list(csv.DictReader(open(stars_csv)))
src = Table()
src["source_id"] = np.array([int(r["source_id"]) for r in rows], dtype=np.int64)
for name, key, unit in (("ra", "ra", "deg"), ("dec", "dec", "deg"), ("parallax", "parallax", "mas"),
                        ("parallax_error", "parallax_error", "mas"), ("phot_g_mean_mag", "g", "mag"),
                        ("nu_eff_used_in_astrometry", "nu_eff", "um**-1"), ("ecl_lat", "ecl_lat", "deg")):
    src[name] = np.array([float(r[key]) for r in rows])
    src[name].unit = unit
src["pseudocolour"] = np.ma.masked_all(len(rows))
src["pseudocolour"].unit = "um**-1"
src["astrometric_params_solved"] = np.full(len(rows), 31, dtype=np.int16)
rng = np.random.default_rng(20261204)
src["ruwe"] = np.float32(rng.uniform(0.9, 1.2, len(rows)))
src.write(out + "/gaia_source.vot", format="votable", overwrite=True)
zp = dict(G=float(sys.argv[3]), BP=float(sys.argv[4]), RP=float(sys.argv[5]))
def shape(a, x):  # a Cepheid-like curve: R21 0.4, R31 0.2 (a pure sinusoid aliases to 2P, 3P)
    return a * (np.sin(x) + 0.4 * np.sin(2 * x + 3.1) + 0.2 * np.sin(3 * x + 6.2))
def mean_offset(a):  # the curve's intensity mean minus its m0
    x = np.linspace(0, 2 * np.pi, 4096, endpoint=False)
    return -2.5 * np.log10(np.mean(10 ** (-0.4 * shape(a, x))))
amp = dict(G=0.35, BP=0.45, RP=0.25)
noise = dict(G=0.003, BP=0.008, RP=0.008)
for r in rows:
    sid, period = int(r["source_id"]), float(r["period"])
    t = np.sort(rng.uniform(1700.0, 2750.0, 45))
    phase0 = rng.uniform(0, 1)
    bad = rng.integers(0, 45)
    cols = {k: [] for k in ("source_id", "transit_id", "band", "time", "mag", "flux", "flux_error",
                            "flux_over_error", "rejected_by_photometry", "rejected_by_variability",
                            "other_flags", "solution_id")}
    for k, tk in enumerate(t):
        for b, dt in (("G", 0.0), ("BP", 3e-5), ("RP", 3e-5)):
            m0 = float(r[b.lower()]) - mean_offset(amp[b])
            m = m0 + shape(amp[b], 2 * np.pi * ((tk + dt) / period + phase0)) + rng.normal(0, noise[b])
            rejected = bool(k == bad and b == "G")
            if rejected:
                m += 1.0
            flux = 10 ** (-0.4 * (m - zp[b]))
            ferr = flux * noise[b] / 1.0857
            cols["source_id"].append(sid); cols["transit_id"].append(10**15 + 1000 * k)
            cols["band"].append(b); cols["time"].append(tk + dt); cols["mag"].append(m)
            cols["flux"].append(flux); cols["flux_error"].append(ferr)
            cols["flux_over_error"].append(np.float32(flux / ferr))
            cols["rejected_by_photometry"].append(False)
            cols["rejected_by_variability"].append(rejected)
            cols["other_flags"].append(0); cols["solution_id"].append(375316653866487564)
    ep = Table(cols)
    ep["time"].unit = "d"; ep["mag"].unit = "mag"; ep["flux"].unit = "electron/s"
    from_table(ep).to_xml(out + "/epoch/EPOCH_PHOTOMETRY-Gaia DR3 %d.xml" % sid,
                          tabledata_format="binary2")
)py";

// The Gaia route as docs/tutorial.md writes it, its very code blocks, on invented sources
// downloaded as the archive names and writes them: the relation comes back within three of the
// fit's own errors of the truth it was drawn with.
TEST(Tutorial, GaiaArchiveDownloadToCalibration) {
  const TutorialBlocks blocks = tutorial_blocks(
      test::doc_section("tutorial.md", "From a Gaia archive download to a calibration"));
  ASSERT_EQ(blocks.files.size(), 4u) << "the Gaia route's four configs";
  ASSERT_EQ(blocks.commands.size(), 5u);
  test::TempDir dir;
  const std::string gaia = dir.file("gaia");
  std::filesystem::create_directories(gaia + "/epoch");
  test::write_text(dir.file("stars.csv"), gaia_mock_stars());
  const auto py = test::run_python(
      kWriteGaiaDownload, {dir.file("stars.csv"), gaia, std::to_string(kGaiaZeroPointG),
                           std::to_string(kGaiaZeroPointBp), std::to_string(kGaiaZeroPointRp)});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  test::write_text(gaia + "/bands.toml", test::read_text(test::source_file("config/bands.toml")));
  for (const char* table : {"5p", "6p"})
    test::write_text(
        gaia + "/zeropoint_" + table + ".txt",
        test::read_text(test::reference_file(std::string("parallax_zeropoint_") + table + ".txt")));
  for (const auto& [path, text] : blocks.files) test::write_text(dir.file(path), text);

  ASSERT_TRUE(run_commands(gaia, blocks.commands));

  // Every source's period came from its Gaia light curve, and its flagged epoch was dropped.
  const StarTable lc = read_fits_table(gaia + "/out/gaia_lightcurves.fits", {"SUMMARY", 0}).table;
  ASSERT_EQ(lc.rows(), static_cast<std::size_t>(kGaiaStars));
  for (std::size_t r = 0; r < lc.rows(); ++r)
    EXPECT_EQ(lc.column("flagged_G").as_real(r), 1.0) << r;
  const StarTable cat = read_fits_table(gaia + "/out/catalog.fits", {"CATALOG", 0}).table;
  EXPECT_GE(cat.rows(), static_cast<std::size_t>(kGaiaStars - 3));
  const auto& origin = cat.column("period_origin").text;
  EXPECT_TRUE(std::all_of(origin.begin(), origin.end(),
                          [](const std::string& o) { return o == "lightcurve"; }));

  const nlohmann::json fit = nlohmann::json::parse(test::read_text(gaia + "/out/fit.json"));
  const nlohmann::json& rel = fit.at("relations").at(0);
  EXPECT_EQ(rel.at("name"), "W_G");
  EXPECT_GE(rel.at("statistics").at("n_used").get<int>(), kGaiaStars - 6);
  const std::map<std::string, double> expected = {
      {"alpha", kAlphaWG}, {"beta", kBetaWG}, {"parallax_offset_mas", kOffsetWG}};
  expect_within_three_errors(rel, expected);
  const nlohmann::json cal =
      nlohmann::json::parse(test::read_text(gaia + "/out/store/gaia-wg/latest/calibration.json"));
  EXPECT_EQ(cal.at("version"), 1);
}

}  // namespace
}  // namespace rungcal
