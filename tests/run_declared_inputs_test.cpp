// SPDX-License-Identifier: MIT
// Tests of rungcal-run's keys against the stages' own declarations (declared_files): on the
// whole demo chain, a change to any file a stage declares it reads reruns exactly the stages
// downstream of that file, and none upstream of it (issue 18: the fit did not rerun when its
// zero-point table changed).
#include <gtest/gtest.h>

#include <filesystem>
#include <map>
#include <set>
#include <sstream>

#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include "rungcal/run/run_parts.hpp"
#include "test_util.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

// The demo's configs and data copied into dir (their relative paths kept), the fit on the
// Lindegren et al. 2021 zero point with the published tables, no bootstrap.
void copy_demo(const test::TempDir& dir) {
  fs::create_directories(dir.file("config"));
  fs::copy(test::source_file("config/demo"), dir.file("config/demo"), fs::copy_options::recursive);
  fs::copy_file(test::source_file("config/bands.toml"), dir.file("config/bands.toml"));
  fs::copy(test::source_file("sample_data"), dir.file("sample_data"), fs::copy_options::recursive);
  fs::create_directories(dir.file("demo_out/incoming"));
  fs::copy_file(test::source_file("sample_data/calibrators.fits"),
                dir.file("demo_out/incoming/calibrators.fits"));
  fs::copy_file(test::reference_file("parallax_zeropoint_5p.txt"), dir.file("zp5.txt"));
  fs::copy_file(test::reference_file("parallax_zeropoint_6p.txt"), dir.file("zp6.txt"));
  const std::string fit = dir.file("config/demo/fit.toml");
  const std::string text = test::read_text(fit);
  ASSERT_NE(text.find("zero_point = \"constant\"\n"), std::string::npos);
  test::write_text(fit, test::replaced(text, {{"zero_point = \"constant\"\n",
                                               "zero_point = \"lindegren2021\"\n"
                                               "zero_point_table_5p = \"../../zp5.txt\"\n"
                                               "zero_point_table_6p = \"../../zp6.txt\"\n"}}));
  const std::string pipeline = dir.file("config/demo/pipeline.toml");
  test::write_text(
      pipeline,
      test::replaced(test::read_text(pipeline),
                     {{"config = \"fit.toml\"\n", "config = \"fit.toml\"\nbootstrap = 0\n"}}));
}

test::CommandResult run(const test::TempDir& dir, const std::string& args = "") {
  return test::run_stage("run", "--config " + dir.file("config/demo/pipeline.toml") + " " + args);
}

// The stage names of a summary list: "a, b, c" after `lead` up to ';' or the line's end.
std::set<std::string> listed(const std::string& output, const std::string& lead) {
  std::set<std::string> names;
  const auto at = output.find(lead);
  if (at == std::string::npos) return names;
  const auto begin = at + lead.size();
  const std::string list = output.substr(begin, output.find_first_of(";\n", begin) - begin);
  std::istringstream in(list);
  for (std::string name; std::getline(in, name, ',');) {
    name.erase(0, name.find_first_not_of(' '));
    if (!name.empty()) names.insert(name);
  }
  return names;
}

// Every file some stage read in the last run that no stage wrote: the chain's own inputs
// (from run_state.json, which records what each stage's declaration named).
std::set<std::string> source_inputs(const test::TempDir& dir) {
  const nlohmann::json state =
      nlohmann::json::parse(test::read_text(dir.file("demo_out/run_state.json")));
  std::set<std::string> read, written;
  for (const auto& [stage, rec] : state.at("stages").items()) {
    for (const auto& [path, sha] : rec.at("inputs").items()) read.insert(path);
    for (const auto& [path, sha] : rec.at("outputs").items()) written.insert(path);
  }
  std::set<std::string> sources;
  for (const auto& path : read)
    if (!written.count(path) && path.find("/store/") == std::string::npos)
      sources.insert(
          fs::relative(fs::weakly_canonical(path), fs::weakly_canonical(dir.path())).string());
  return sources;
}

// One change to a file, made so that its key changes: a TOML file is keyed by its parsed
// content, so a value moves; any other file gains a byte (a dry run reads no data).
struct Change {
  std::string from, to;  // empty: append a newline
};

const std::vector<std::string> kChain = {
    "lightcurve", "ingest",         "deredden",         "fit",  "grid", "publish",
    "report",     "targets_ingest", "targets_deredden", "apply"};

TEST(RunDeclaredInputs, ChangingAnyDeclaredInputRerunsExactlyTheStagesDownstreamOfIt) {
  test::TempDir dir;
  copy_demo(dir);
  auto first = run(dir);
  ASSERT_EQ(first.exit_code, 6) << first.output;
  ASSERT_EQ(listed(first.output, "; ran "), std::set<std::string>(kChain.begin(), kChain.end()))
      << first.output;

  // Downstream by the data flow of docs/operations.md, written out by hand: the light
  // curves feed ingest and the report; the band table every stage that dereddens or reads
  // bands; the fit's tables and config the fit and the grid; publishing a new version
  // reruns the report and apply.
  const std::set<std::string> after_fit = {"fit", "grid", "publish", "report", "apply"};
  auto with = [](std::set<std::string> s, std::initializer_list<std::string> more) {
    s.insert(more);
    return s;
  };
  const std::map<std::string, std::pair<Change, std::set<std::string>>> expected = {
      {"sample_data/lightcurves.csv", {{}, with(after_fit, {"lightcurve", "ingest", "deredden"})}},
      {"demo_out/incoming/calibrators.fits", {{}, with(after_fit, {"ingest", "deredden"})}},
      {"config/bands.toml",
       {{"wavelength_aa = 4380.0", "wavelength_aa = 4381.0"},
        with(after_fit, {"lightcurve", "ingest", "deredden", "targets_deredden"})}},
      {"config/demo/deredden.toml", {{"r_v = 3.1", "r_v = 3.2"}, with(after_fit, {"deredden"})}},
      {"config/demo/fit.toml", {{"max_ruwe = 1.4", "max_ruwe = 1.5"}, after_fit}},
      {"zp5.txt", {{}, after_fit}},
      {"zp6.txt", {{}, after_fit}},
      {"sample_data/targets.csv", {{}, {"targets_ingest", "targets_deredden", "apply"}}},
  };
  // Every file the stages declared they read is in the table: a new one needs its row.
  std::set<std::string> listed_inputs;
  for (const auto& [file, change] : expected) listed_inputs.insert(file);
  EXPECT_EQ(source_inputs(dir), listed_inputs);

  for (const auto& [file, change_and_stages] : expected) {
    const auto& [change, stages] = change_and_stages;
    const std::string path = dir.file(file);
    const std::string original = test::read_text(path);
    if (change.from.empty()) {
      test::write_text(path, original + "\n");
    } else {
      ASSERT_NE(original.find(change.from), std::string::npos) << file;
      test::write_text(path, test::replaced(original, {{change.from, change.to}}));
    }
    auto dry = run(dir, "--dry-run");
    EXPECT_EQ(dry.exit_code, 0) << file << ": " << dry.output;
    EXPECT_EQ(listed(dry.output, "(dry run): would run "), stages) << file << ": " << dry.output;
    std::set<std::string> rest;
    for (const auto& s : kChain)
      if (!stages.count(s)) rest.insert(s);
    EXPECT_EQ(listed(dry.output, "; up to date: "), rest) << file << ": " << dry.output;
    test::write_text(path, original);
  }
  EXPECT_EQ(run(dir, "--dry-run").exit_code, 3);

  // And for real: a zero-point table with other coefficients reruns the fit and everything
  // after it, and nothing before it.
  const std::string zp5 = dir.file("zp5.txt");
  std::string table = test::read_text(zp5);
  ASSERT_NE(table.find("-26.98"), std::string::npos);
  test::write_text(zp5, test::replaced(table, {{"-26.98", "-16.98"},
                                               {"-27.23", "-17.23"},
                                               {"-30.33", "-20.33"},
                                               {"-33.54", "-23.54"},
                                               {"-13.65", "-3.65"},
                                               {"-19.53", "-9.53"},
                                               {"-37.99", "-27.99"},
                                               {"-38.33", "-28.33"}}));
  auto real = run(dir);
  EXPECT_TRUE(real.exit_code == 6 || real.exit_code == 4) << real.output;  // a new version
  EXPECT_EQ(listed(real.output, "; ran "), after_fit) << real.output;
  const std::string log = test::read_text(dir.file("demo_out/logs/rungcal-run.log"));
  EXPECT_NE(log.find("fit: running (input zp5.txt changed)"), std::string::npos);
  EXPECT_NE(log.find("grid: running (input zp5.txt changed)"), std::string::npos);
  for (const char* upstream :
       {"lightcurve", "ingest", "deredden", "targets_ingest", "targets_deredden"})
    EXPECT_NE(log.rfind(fmt::format("{}: up to date, skipped", upstream)), std::string::npos)
        << upstream;
  EXPECT_EQ(run(dir).exit_code, 3);
}

TEST(RunDeclaredInputs, AGlobKeysTheStageByEveryFileItMatchesNow) {
  // One file per star: a file changed, added or removed under the pattern reruns the stage.
  test::TempDir dir;
  test::write_text(dir.file("lc/S1.dat"), "1 10.0 0.01\n");
  test::write_text(dir.file("lc/S2.dat"), "1 11.0 0.01\n");
  run_parts::Stage s{"lightcurve", "", "", {}, {}};
  s.files.input_globs = {dir.file("lc/*.dat")};
  EXPECT_EQ(input_files_now(s.files),
            (std::vector<std::string>{dir.file("lc/S1.dat"), dir.file("lc/S2.dat")}));
  run_parts::RunState state(dir.file("run_state.json"));
  const std::string key = run_parts::stage_key(s);
  state.record(s, key);
  EXPECT_EQ(state.why_run(s, key), "");

  test::write_text(dir.file("lc/S2.dat"), "1 11.5 0.01\n");
  EXPECT_NE(run_parts::stage_key(s), key);
  EXPECT_EQ(state.why_run(s, run_parts::stage_key(s)), "input S2.dat changed");
  test::write_text(dir.file("lc/S2.dat"), "1 11.0 0.01\n");
  EXPECT_EQ(run_parts::stage_key(s), key);

  test::write_text(dir.file("lc/S3.dat"), "1 12.0 0.01\n");
  EXPECT_EQ(state.why_run(s, run_parts::stage_key(s)), "new input S3.dat");
  fs::remove(dir.file("lc/S3.dat"));
  fs::remove(dir.file("lc/S1.dat"));
  EXPECT_EQ(state.why_run(s, run_parts::stage_key(s)), "input S1.dat is gone");
}

}  // namespace
}  // namespace rungcal
