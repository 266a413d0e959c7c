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
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include "rungcal/ingest/ingest.hpp"
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

  for (const auto& command : blocks.commands) {
    auto run = test::run_command("cd " + test::shell_quote(survey) +
                                 " && PATH=" + test::shell_quote(RUNGCAL_BIN_DIR) + ":\"$PATH\" " +
                                 command + " -q");
    ASSERT_EQ(run.exit_code, 0) << command << "\n" << run.output;
  }

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
  for (const auto& [name, value] : expected) {
    const nlohmann::json& p = parameter(rel, name);
    const double error = p.at("error").get<double>();
    EXPECT_GT(error, 0) << name;
    EXPECT_LT(std::abs(p.at("value").get<double>() - value), 3 * error)
        << name << " = " << p.at("value") << " +- " << error << ", truth " << value;
  }

  // Published as version 1, and the report wrote its relation table.
  const nlohmann::json cal = nlohmann::json::parse(
      test::read_text(survey + "/out/store/survey-wvi/latest/calibration.json"));
  EXPECT_EQ(cal.at("version"), 1);
  for (const char* product :
       {"relations.tex", "stars_W_VI.csv", "pl_W_VI.pdf", "residuals_W_VI.png"})
    EXPECT_TRUE(test::file_exists(survey + "/out/report/" + product)) << product;
}

// The Gaia route's ingest config is valid as written: the preset, constant mode and class,
// and a join that supplies the periods.
TEST(Tutorial, GaiaRouteIngestConfigIsValid) {
  const TutorialBlocks blocks = tutorial_blocks(
      test::doc_section("tutorial.md", "From a Gaia archive download to a calibration"));
  ASSERT_EQ(blocks.files.count("gaia/ingest.toml"), 1u);
  test::TempDir dir;
  test::write_text(dir.file("gaia/ingest.toml"), blocks.files.at("gaia/ingest.toml"));
  const IngestOptions o = ingest_options_from_file(dir.file("gaia/ingest.toml"));
  EXPECT_EQ(o.check(), "");
  EXPECT_FALSE(o.quantities.count("period"));
  EXPECT_FALSE(o.lightcurves.summary_path.empty());
}

}  // namespace
}  // namespace rungcal
