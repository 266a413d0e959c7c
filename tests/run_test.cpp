// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/run (rungcal-run): skipping what has not changed, rerunning what
// has, the lock between runs, SIGKILL at any point, the drift alarm and the exit codes.
// The data are the demo's simulated calibrators (known truth).
#include <fcntl.h>
#include <gtest/gtest.h>
#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <thread>

#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include "rungcal/calibration/store.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

// A pipeline config over the demo's stage configs, writing into dir, reading the calibrator
// catalog from dir/incoming.fits.
std::string pipeline_config(const test::TempDir& dir, const std::string& run_extra = "",
                            int bootstrap = 0, bool with_lightcurves = true) {
  const std::string demo = test::source_file("config/demo");
  std::string text = fmt::format(R"([run]
folder = "{0}/run"
calibration = "test-cal"
{1}
[ingest]
config = "{2}/ingest.toml"
input = "{0}/incoming.fits"
[deredden]
config = "{2}/deredden.toml"
[fit]
config = "{2}/fit.toml"
bootstrap = {3}
[report]
enabled = false
)",
                                 dir.path(), run_extra, demo, bootstrap);
  if (with_lightcurves)
    text += fmt::format("[lightcurve]\nconfig = \"{}/lightcurve.toml\"\n", demo);
  return text;
}

void stage_catalog(const test::TempDir& dir,
                   const std::string& source = "sample_data/calibrators.fits") {
  fs::copy_file(test::source_file(source), dir.file("incoming.fits"),
                fs::copy_options::overwrite_existing);
}

// Rewrites the incoming catalog with edit(table) applied to its STARS table.
template <typename Edit>
void edit_catalog(const test::TempDir& dir, Edit&& edit) {
  SourceTable t = read_fits_table(dir.file("incoming.fits"), {"STARS", 0});
  edit(t.table);
  write_fits_tables(dir.file("incoming.fits"), {{"STARS", &t.table}});
}

test::CommandResult run(const test::TempDir& dir, const std::string& args = "") {
  return test::run_stage("run", "--config " + dir.file("pipeline.toml") + " " + args);
}

bool ran(const std::string& output, const std::string& stage) {
  return output.find("ran ") != std::string::npos &&
         output.substr(output.find("ran ")).find(stage) != std::string::npos;
}

// Every version folder is whole: its JSON parses and names its own version; latest points
// at the newest.
void expect_store_intact(const std::string& store, const std::string& name) {
  const fs::path folder = fs::path(store) / name;
  if (!fs::exists(folder)) return;
  std::vector<int> versions = calibration_versions(store, name);
  for (int v : versions) {
    const fs::path dir = folder / fmt::format("v{:04d}", v);
    ASSERT_TRUE(fs::exists(dir / "calibration.json")) << dir;
    ASSERT_TRUE(fs::exists(dir / "calibration.fits")) << dir;
    nlohmann::json j = nlohmann::json::parse(test::read_text((dir / "calibration.json").string()));
    EXPECT_EQ(j.at("version").get<int>(), v);
  }
  for (const auto& e : fs::directory_iterator(folder)) {
    // A publisher killed mid-way leaves .vNNNN.tmp-PID or .latest.tmp-PID: never a version,
    // removed by the next publish.
    const std::string n = e.path().filename().string();
    const bool leftover = (n.rfind(".v", 0) == 0 || n.rfind(".latest", 0) == 0) &&
                          n.find(".tmp-") != std::string::npos;
    EXPECT_TRUE(n == "latest" || n == ".lock" || n == ".pending" || n == "withdrawn.json" ||
                n.rfind('v', 0) == 0 || leftover)
        << "stray entry " << n;
    EXPECT_EQ(n.find(".part"), std::string::npos) << n;
  }
  // 'latest' names the newest version, except in the moment between a version's rename and
  // the link's, which the .pending marker records and the next publish completes.
  if (!versions.empty() && !fs::exists(folder / ".pending") &&
      withdrawn_versions(store, name).empty()) {
    EXPECT_EQ(load_calibration(store, name + "@latest").version(), versions.back());
  }
}

TEST(Run, SecondRunWithNothingChangedDoesNoStageAndExits3) {
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir));
  auto first = run(dir);
  ASSERT_EQ(first.exit_code, 6) << first.output;  // a new calibration
  EXPECT_NE(first.output.find("new calibration test-cal@1"), std::string::npos) << first.output;
  const std::string state = test::read_text(dir.file("run/run_state.json"));
  auto second = run(dir);
  EXPECT_EQ(second.exit_code, 3) << second.output;
  EXPECT_NE(second.output.find("nothing changed"), std::string::npos) << second.output;
  EXPECT_EQ(test::read_text(dir.file("run/run_state.json")), state);  // nothing rewritten
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), std::vector<int>{1});
  const std::string log = test::read_text(dir.file("run/logs/rungcal-run.log"));
  EXPECT_NE(log.find("fit: up to date, skipped"), std::string::npos);
}

TEST(Run, ANewParallaxRerunsOnlyTheStagesItReachesAndPublishesWithTheDiffInTheLog) {
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir));
  ASSERT_EQ(run(dir).exit_code, 6);
  edit_catalog(dir, [](StarTable& t) { t.column("PLX").real[4] += 0.05; });
  auto dry = run(dir, "--dry-run");
  EXPECT_EQ(dry.exit_code, 0) << dry.output;
  EXPECT_NE(dry.output.find("would run ingest, deredden, fit, publish; up to date: lightcurve"),
            std::string::npos)
      << dry.output;
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"),
            std::vector<int>{1});  // a dry run writes nothing
  auto second = run(dir);
  EXPECT_EQ(second.exit_code, 6) << second.output;
  EXPECT_TRUE(ran(second.output, "ingest") && ran(second.output, "fit") &&
              ran(second.output, "publish"))
      << second.output;
  EXPECT_FALSE(ran(second.output, "lightcurve")) << second.output;
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), (std::vector<int>{1, 2}));
  const std::string log = test::read_text(dir.file("run/logs/rungcal-run.log"));
  EXPECT_NE(log.find("ingest: running (input incoming.fits changed)"), std::string::npos);
  EXPECT_NE(log.find("shift W_VI alpha"), std::string::npos);
  expect_store_intact(dir.file("run/store"), "test-cal");
}

TEST(Run, RerunWithTheSameInputsGivesByteIdenticalCalibrationContent) {
  // --force reruns every stage: the fit is deterministic, so publish finds the content equal
  // to the latest version and makes none (exit 0: ran, calibration unchanged).
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 50));
  ASSERT_EQ(run(dir).exit_code, 6);
  const std::string fit_first = test::read_text(dir.file("run/fit.json"));
  auto again = run(dir, "--force");
  EXPECT_EQ(again.exit_code, 0) << again.output;
  EXPECT_NE(again.output.find("unchanged"), std::string::npos) << again.output;
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), std::vector<int>{1});
  // The fit result is the same but for its time and the byte hash of its input, whose
  // FITS header carries the time it was written.
  auto without_time = [](const std::string& text) {
    nlohmann::json j = nlohmann::json::parse(text);
    j["provenance"].erase("created_utc");
    for (auto& in : j["provenance"]["inputs"]) in.erase("sha256");
    return j.dump();
  };
  EXPECT_TRUE(without_time(test::read_text(dir.file("run/fit.json"))) == without_time(fit_first));
}

TEST(Run, DriftAlarmFiresOnAShiftedInputAndNotOnAnUnchangedOne) {
  // Every parallax 0.1 mas larger: the fitted offset moves by ~10 of its sigmas.
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"),
                   pipeline_config(dir, "drift_alarm_sigma = 3.0", 0, false));
  ASSERT_EQ(run(dir).exit_code, 6);
  EXPECT_EQ(run(dir).exit_code, 3);  // unchanged: no alarm
  edit_catalog(dir, [](StarTable& t) {
    for (double& p : t.column("PLX").real) p += 0.1;
  });
  auto shifted = run(dir);
  EXPECT_EQ(shifted.exit_code, 4) << shifted.output;
  EXPECT_NE(shifted.output.find("DRIFT ALARM"), std::string::npos) << shifted.output;
  EXPECT_NE(shifted.output.find("parallax_offset_mas"), std::string::npos) << shifted.output;
  // The alarm does not hold the version back: it is published, and said loudly.
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), (std::vector<int>{1, 2}));
}

TEST(Run, ADriftAlarmOfARunKilledAfterPublishingIsRaisedByTheNextRun) {
  // The shifted version is published, then the run is killed before its summary: the next
  // run has nothing left to do but must still raise the alarm, measured from version 1
  // (the last one reported), and only once.
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"),
                   pipeline_config(dir, "drift_alarm_sigma = 3.0", 0, false));
  ASSERT_EQ(run(dir).exit_code, 6);
  edit_catalog(dir, [](StarTable& t) {
    for (double& p : t.column("PLX").real) p += 0.1;
  });
  auto killed =
      test::run_command(std::string("RUNGCAL_FAULT_AT=run_before_summary ") + RUNGCAL_BIN_DIR +
                        "/rungcal-run --config " + dir.file("pipeline.toml") + " 2>&1");
  ASSERT_EQ(killed.exit_code, 128 + SIGKILL) << killed.output;
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), (std::vector<int>{1, 2}));
  auto next = run(dir);
  EXPECT_EQ(next.exit_code, 4) << next.output;
  EXPECT_NE(next.output.find("DRIFT ALARM: new test-cal@2"), std::string::npos) << next.output;
  EXPECT_NE(next.output.find("ran none"), std::string::npos) << next.output;
  const std::string log = test::read_text(dir.file("run/logs/rungcal-run.log"));
  EXPECT_NE(log.find("parallax_offset_mas from v1"), std::string::npos);
  EXPECT_EQ(run(dir).exit_code, 3);
}

TEST(Run, TwoRunsAtOnceOneWaitsOrRefusesAndBothSaySo) {
  test::TempDir dir;
  stage_catalog(dir);
  // A slow first run (bootstrap) holds the lock; a second with no patience refuses (exit 5),
  // a third with patience waits and then finds nothing to do.
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 300, false));
  test::write_text(dir.file("impatient.toml"), pipeline_config(dir, "lock_wait = 0", 300, false));
  const std::string bin = std::string(RUNGCAL_BIN_DIR) + "/rungcal-run";
  auto start = [&](const std::string& cfg, const std::string& out) {
    pid_t pid = fork();
    if (pid == 0) {
      const std::string cmd = bin + " --config " + cfg + " > " + out + " 2>&1";
      execl("/bin/sh", "sh", "-c", cmd.c_str(), static_cast<char*>(nullptr));
      _exit(127);
    }
    return pid;
  };
  auto wait_exit = [](pid_t pid) {
    int status = 0;
    waitpid(pid, &status, 0);
    return WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  };
  pid_t first = start(dir.file("pipeline.toml"), dir.file("first.out"));
  // Wait until the first run holds the lock (its log exists), then start the others.
  for (int i = 0; i < 200 && !fs::exists(dir.file("run/logs/rungcal-run.log")); ++i)
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  std::this_thread::sleep_for(std::chrono::milliseconds(100));
  pid_t impatient = start(dir.file("impatient.toml"), dir.file("impatient.out"));
  pid_t patient = start(dir.file("pipeline.toml"), dir.file("patient.out"));
  const int rc_impatient = wait_exit(impatient), rc_first = wait_exit(first),
            rc_patient = wait_exit(patient);
  EXPECT_EQ(rc_first, 6) << test::read_text(dir.file("first.out"));
  EXPECT_EQ(rc_impatient, 5) << test::read_text(dir.file("impatient.out"));
  EXPECT_NE(test::read_text(dir.file("impatient.out")).find("another rungcal-run holds the lock"),
            std::string::npos);
  EXPECT_EQ(rc_patient, 3) << test::read_text(dir.file("patient.out"));
  EXPECT_NE(test::read_text(dir.file("patient.out")).find("waiting up to"), std::string::npos);
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), std::vector<int>{1});
  expect_store_intact(dir.file("run/store"), "test-cal");
}

// Kills a run with SIGKILL `after` into it; returns true when it was still running then.
bool run_and_kill(const std::string& config, std::chrono::milliseconds after) {
  const std::string bin = std::string(RUNGCAL_BIN_DIR) + "/rungcal-run";
  pid_t pid = fork();
  if (pid == 0) {
    const int null_fd = ::open("/dev/null", O_WRONLY);
    dup2(null_fd, 1);
    dup2(null_fd, 2);
    execl(bin.c_str(), bin.c_str(), "--config", config.c_str(), static_cast<char*>(nullptr));
    _exit(127);
  }
  std::this_thread::sleep_for(after);
  const bool alive = ::kill(pid, SIGKILL) == 0;
  int status = 0;
  waitpid(pid, &status, 0);
  return alive && WIFSIGNALED(status);
}

TEST(Run, SigkillAtRandomMomentsLeavesOnlyWholeVersionsAndTheNextRunFinishes) {
  // 24 kills at moments drawn over a full run's length (seeded), alternating between an
  // unchanged and a changed input so some kills land inside fit and publish; after each,
  // the store holds only whole versions; at the end an unkilled run completes the work.
  test::TempDir dir;
  stage_catalog(dir);
  // 40 resamples make the fit a good part of a run (the joint fit resamples all relations
  // at once), so kills land inside it.
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 40));
  auto t0 = std::chrono::steady_clock::now();
  ASSERT_EQ(run(dir).exit_code, 6);
  const double full_ms =
      std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - t0).count();
  Random rng(20261202);
  int killed = 0;
  // RUNGCAL_KILL_ROUNDS=500 for a longer soak (docs/operations.md).
  const char* rounds_env = std::getenv("RUNGCAL_KILL_ROUNDS");
  const int rounds = rounds_env ? std::max(1, std::atoi(rounds_env)) : 24;
  for (int k = 0; k < rounds; ++k) {
    edit_catalog(dir, [&](StarTable& t) { t.column("PLX").real[7] += (k % 2 ? -0.01 : 0.01); });
    const auto after =
        std::chrono::milliseconds(static_cast<int>(rng.uniform(0.02, 0.9) * full_ms));
    killed += run_and_kill(dir.file("pipeline.toml"), after);
    expect_store_intact(dir.file("run/store"), "test-cal");
  }
  // Most kills land while the run is still going (under load the runs are slower, not
  // faster, than the timed one); the few that come after the end test a finished run.
  EXPECT_GE(killed, rounds / 3);
  auto finish = run(dir);
  EXPECT_TRUE(finish.exit_code == 6 || finish.exit_code == 0 || finish.exit_code == 3)
      << finish.output;
  EXPECT_EQ(run(dir).exit_code, 3);  // and then all is up to date
  expect_store_intact(dir.file("run/store"), "test-cal");
  // The run state records the input now in place: the last fit used the last edit.
  const std::string incoming_sha = sha256_file(dir.file("incoming.fits"));
  EXPECT_NE(test::read_text(dir.file("run/run_state.json")).find(incoming_sha), std::string::npos);
}

TEST(Run, KilledAfterEachStageTheNextRunPicksUpWhereItStopped) {
  // Deterministic kill points (RUNGCAL_FAULT_AT): right after each stage's products, before
  // the run state records them, inside publish at each of its steps, and after the last
  // stage before the summary. The killed run never reported its version, so the next run
  // reports it as new (exit 6) whether it made the version or found it made.
  const char* points[] = {
      "run_after_lightcurve", "run_after_ingest",      "run_after_deredden",
      "run_after_fit",        "run_after_publish",     "publish_locked",
      "publish_json_written", "publish_version_built", "publish_version_renamed",
      "publish_link_made",    "run_before_summary"};
  for (const char* point : points) {
    test::TempDir dir;
    stage_catalog(dir);
    test::write_text(dir.file("pipeline.toml"), pipeline_config(dir));
    auto killed =
        test::run_command(std::string("RUNGCAL_FAULT_AT=") + point + " " + RUNGCAL_BIN_DIR +
                          "/rungcal-run --config " + dir.file("pipeline.toml") + " 2>&1");
    EXPECT_EQ(killed.exit_code, 128 + SIGKILL) << point << ": " << killed.output;
    expect_store_intact(dir.file("run/store"), "test-cal");
    auto next = run(dir);
    EXPECT_EQ(next.exit_code, 6) << point << ": " << next.output;
    EXPECT_NE(next.output.find("new calibration test-cal@1 (the first version)"), std::string::npos)
        << point << ": " << next.output;
    // A version made by the killed run is found, not made twice.
    EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), std::vector<int>{1})
        << point;
    EXPECT_EQ(run(dir).exit_code, 3) << point;
  }
}

TEST(Run, AnEditedZeroPointTableRerunsTheFitAndAnotherSpellingOfTheConfigDoesNot) {
  // Every file a stage reads keys it: here the fit's Lindegren et al. 2021 tables, named in
  // a copy of the demo's fit config (the constant recipe stays in use; the tables are read
  // and checked all the same).
  test::TempDir dir;
  stage_catalog(dir);
  const std::string zp5 = dir.file("zp5.txt"), zp6 = dir.file("zp6.txt");
  fs::copy_file(test::reference_file("parallax_zeropoint_5p.txt"), zp5);
  fs::copy_file(test::reference_file("parallax_zeropoint_6p.txt"), zp6);
  test::write_text(dir.file("fit.toml"),
                   test::replaced(test::read_text(test::source_file("config/demo/fit.toml")),
                                  {{"zero_point_mas = -0.020\n",
                                    "zero_point_mas = -0.020\nzero_point_table_5p = \"" + zp5 +
                                        "\"\nzero_point_table_6p = \"" + zp6 + "\"\n"},
                                   {"../../demo_out", dir.path()}}));
  test::write_text(
      dir.file("pipeline.toml"),
      test::replaced(pipeline_config(dir),
                     {{test::source_file("config/demo") + "/fit.toml", dir.file("fit.toml")}}));
  ASSERT_EQ(run(dir).exit_code, 6);
  // The same config named through another path: the same keys, nothing to do.
  auto again = test::run_command("cd " + test::shell_quote(dir.path()) + " && " +
                                 test::shell_quote(std::string(RUNGCAL_BIN_DIR) + "/rungcal-run") +
                                 " --config ./../" + fs::path(dir.path()).filename().string() +
                                 "/pipeline.toml");
  EXPECT_EQ(again.exit_code, 3) << again.output;
  std::string table = test::read_text(zp5);
  table.replace(table.find("-26.98"), 6, "-16.98");
  test::write_text(zp5, table);
  auto dry = run(dir, "--dry-run");
  EXPECT_NE(dry.output.find("would run fit"), std::string::npos) << dry.output;
  auto real = run(dir);
  EXPECT_TRUE(ran(real.output, "fit")) << real.output;
}

// The demo's fit config copied into dir (its relative paths made absolute), with edits.
std::string copy_fit_config(const test::TempDir& dir,
                            std::vector<std::pair<std::string, std::string>> edits = {}) {
  edits.insert(edits.begin(), {"../../demo_out", dir.path()});
  const std::string path = dir.file("fit.toml");
  test::write_text(
      path, test::replaced(test::read_text(test::source_file("config/demo/fit.toml")), edits));
  return path;
}

std::string with_fit_config(const std::string& pipeline, const std::string& fit) {
  return test::replaced(pipeline, {{test::source_file("config/demo") + "/fit.toml", fit}});
}

TEST(Run, ACommentOrLayoutEditOfAConfigRerunsNothingAndPublishesNothing) {
  // Stages are keyed by a config's parsed content (issue 15: a comment-only edit published a
  // new version with every shift +0.00).
  test::TempDir dir;
  stage_catalog(dir);
  const std::string fit = copy_fit_config(dir);
  test::write_text(dir.file("pipeline.toml"),
                   with_fit_config(pipeline_config(dir, "", 0, false), fit));
  ASSERT_EQ(run(dir).exit_code, 6);
  test::write_text(fit, "# reviewed 2026-12-02: no change\n" +
                            test::replaced(test::read_text(fit), {{" = ", "   =   "}}) +
                            "\n\n# end\n");
  auto again = run(dir, "--dry-run");
  EXPECT_EQ(again.exit_code, 3) << again.output;
  again = run(dir);
  EXPECT_EQ(again.exit_code, 3) << again.output;
  EXPECT_EQ(calibration_versions(dir.file("run/store"), "test-cal"), std::vector<int>{1});
  // A value edit is a change.
  test::write_text(fit, test::replaced(test::read_text(fit), {{"zero_point_mas   =   -0.020",
                                                               "zero_point_mas = -0.017"}}));
  auto changed = run(dir, "--dry-run");
  EXPECT_NE(changed.output.find("fit: would run (config changed)"), std::string::npos)
      << changed.output;
}

TEST(Run, RollingLatestBackIsHonouredDownstreamAndWithdrawnContentIsNotRepublished) {
  // Issue 15: after a rollback the nightly apply kept using the highest version, --dry-run
  // said "up to date", and --force republished the withdrawn content as a new version.
  test::TempDir dir;
  stage_catalog(dir);
  const std::string demo = test::source_file("config/demo");
  const std::string apply = fmt::format(
      "[apply]\nrelation = \"W_VI\"\ntargets_ingest = \"{0}/ingest_targets.toml\"\n"
      "targets_deredden = \"{1}\"\n",
      demo, dir.file("deredden_targets.toml"));
  test::write_text(dir.file("deredden_targets.toml"),
                   test::replaced(test::read_text(demo + "/deredden_targets.toml"),
                                  {{"../../demo_out", dir.file("run")},
                                   {"../bands.toml", test::source_file("config/bands.toml")}}));
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 0, false) + apply);
  ASSERT_EQ(run(dir).exit_code, 6);
  edit_catalog(dir, [](StarTable& t) { t.column("PLX").real[4] += 0.05; });
  ASSERT_EQ(run(dir).exit_code, 6);
  const std::string store = dir.file("run/store");
  ASSERT_EQ(calibration_versions(store, "test-cal"), (std::vector<int>{1, 2}));

  auto rollback =
      test::run_stage("publish", "--store " + store + " --name test-cal --set-latest 1");
  ASSERT_EQ(rollback.exit_code, 0) << rollback.output;
  EXPECT_EQ(load_calibration(store, "test-cal@latest").version(), 1);
  ASSERT_EQ(withdrawn_versions(store, "test-cal").size(), 1u);
  EXPECT_EQ(withdrawn_versions(store, "test-cal")[0].version, 2);

  auto dry = run(dir, "--dry-run");
  EXPECT_NE(dry.output.find("apply: would run"), std::string::npos) << dry.output;
  auto after = run(dir);
  EXPECT_EQ(after.exit_code, 6) << after.output;
  EXPECT_NE(after.output.find("latest is test-cal@1, rolled back from version 2"),
            std::string::npos)
      << after.output;
  EXPECT_TRUE(ran(after.output, "apply")) << after.output;
  EXPECT_NE(test::run_command("grep -a -c 'test-cal@1' " + dir.file("run/distances.fits")).output,
            "0\n")
      << "apply used the version latest names (keyword RGCALIB)";
  EXPECT_EQ(run(dir).exit_code, 3);

  // The inputs still give version 2's content: a forced rerun does not bring it back.
  auto forced = run(dir, "--force");
  EXPECT_EQ(forced.exit_code, 0) << forced.output;
  EXPECT_NE(forced.output.find("withdrawn version 2's content again, not republished"),
            std::string::npos)
      << forced.output;
  EXPECT_EQ(calibration_versions(store, "test-cal"), (std::vector<int>{1, 2}));
  EXPECT_EQ(load_calibration(store, "test-cal@latest").version(), 1);

  // Asked for, it is published as a new version (numbers are never reused).
  test::write_text(dir.file("pipeline.toml"),
                   pipeline_config(dir, "republish_withdrawn = true", 0, false) + apply);
  auto republished = run(dir);
  EXPECT_EQ(republished.exit_code, 6) << republished.output;
  EXPECT_EQ(calibration_versions(store, "test-cal"), (std::vector<int>{1, 2, 3}));
  EXPECT_EQ(load_calibration(store, "test-cal@latest").version(), 3);
  EXPECT_TRUE(withdrawn_versions(store, "test-cal").size() == 1u);  // 2 stays withdrawn
}

TEST(Run, ApplyTakesTheGridBudgetAndWritesTheHostCovariance) {
  // Issue 17: with a [grid] stage, apply's systematic error comes from its budget, apply
  // reruns when the budget changes, and the host covariance is one of its products.
  test::TempDir dir;
  stage_catalog(dir);
  const std::string demo = test::source_file("config/demo");
  test::write_text(dir.file("deredden_targets.toml"),
                   test::replaced(test::read_text(demo + "/deredden_targets.toml"),
                                  {{"../../demo_out", dir.file("run")},
                                   {"../bands.toml", test::source_file("config/bands.toml")}}));
  auto grid = [&](const std::string& ruwe) {
    test::write_text(
        dir.file("grid.toml"),
        fmt::format("[grid]\ncatalog = \"unused.fits\"\nderedden = \"{0}/deredden.toml\"\n"
                    "fit = \"{0}/fit.toml\"\n[[variant]]\nname = \"ruwe\"\n"
                    "category = \"quality cuts\"\nmax_ruwe = {1}\n",
                    demo, ruwe));
  };
  grid("1.2");
  test::write_text(
      dir.file("pipeline.toml"),
      pipeline_config(dir, "", 0, false) +
          fmt::format("[grid]\nconfig = \"{0}\"\n[apply]\nrelation = \"W_VI\"\n"
                      "targets_ingest = \"{1}/ingest_targets.toml\"\ntargets_deredden = \"{2}\"\n",
                      dir.file("grid.toml"), demo, dir.file("deredden_targets.toml")));
  auto first = run(dir);
  ASSERT_EQ(first.exit_code, 6) << first.output;
  ASSERT_TRUE(test::file_exists(dir.file("run/distances_host_covariance.csv")));
  SourceTable hosts = read_fits_table(dir.file("run/distances.fits"), {"HOSTS", 0});
  EXPECT_EQ(std::get<std::int64_t>(hosts.table.keyword("RGNSYSV")->value), 1);
  const double sys = hosts.table.column("mu_sys_err").real[0];
  EXPECT_GT(sys, 0.0);
  SourceTable cov = read_fits_table(dir.file("run/distances.fits"), {"HOST_COVARIANCE", 0});
  EXPECT_NEAR(cov.table.column("cov_sys").real[0], sys * sys, 1e-15);
  EXPECT_EQ(run(dir).exit_code, 3);  // nothing changed: apply up to date
  grid("1.1");                       // a new budget: the grid and apply rerun
  auto again = run(dir);
  EXPECT_TRUE(ran(again.output, "grid")) << again.output;
  EXPECT_TRUE(ran(again.output, "apply")) << again.output;
}

TEST(Run, ANewVersionWhereNoParameterMovedSaysSoNotFirstVersion) {
  // A version published by hand with the same numbers (here: another software version in its
  // provenance) is news, but nothing moved: the summary said "(the first version)".
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 0, false));
  auto first = run(dir);
  ASSERT_EQ(first.exit_code, 6);
  EXPECT_NE(first.output.find("(the first version)"), std::string::npos) << first.output;
  nlohmann::json fit = nlohmann::json::parse(test::read_text(dir.file("run/fit.json")));
  fit["provenance"]["software_version"] = "0.0.0-other";
  test::write_text(dir.file("other_fit.json"), fit.dump());
  auto hand =
      test::run_stage("publish", "--store " + dir.file("run/store") + " --name test-cal --fit " +
                                     dir.file("other_fit.json"));
  ASSERT_EQ(hand.exit_code, 0) << hand.output;
  auto next = run(dir);
  EXPECT_EQ(next.exit_code, 6) << next.output;
  EXPECT_NE(next.output.find("new calibration test-cal@2 (no parameter moved)"), std::string::npos)
      << next.output;
}

TEST(Run, RowsRefusedAtIngestAreInTheSummaryAndTheLog) {
  test::TempDir dir;
  stage_catalog(dir);
  edit_catalog(dir, [](StarTable& t) { t.column("PERIOD").real[2] = -1; });
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 0, false));
  auto r = run(dir);
  ASSERT_EQ(r.exit_code, 6) << r.output;
  EXPECT_NE(r.output.find("; ingest refused 1 of "), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("row 3 ("), std::string::npos) << r.output;
  const std::string log = test::read_text(dir.file("run/logs/rungcal-run.log"));
  EXPECT_NE(log.find("ingest refused 1 of"), std::string::npos);
}

TEST(Run, QuietPrintsNothingAndADryRunGivesItsReasonsWithoutATerminal) {
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 0, false));
  // Warnings go on, on stderr; stdout (the summary) is silent.
  auto quiet =
      test::run_command("{ " + test::shell_quote(std::string(RUNGCAL_BIN_DIR) + "/rungcal-run") +
                        " -q --config " + dir.file("pipeline.toml") + " 2>/dev/null; }");
  EXPECT_EQ(quiet.exit_code, 6) << quiet.output;
  EXPECT_EQ(quiet.output, "");
  edit_catalog(dir, [](StarTable& t) { t.column("PLX").real[4] += 0.05; });
  auto dry = run(dir, "--dry-run");  // run_command has no terminal
  EXPECT_NE(dry.output.find("ingest: would run (input incoming.fits changed)"), std::string::npos)
      << dry.output;
  EXPECT_NE(dry.output.find("fit: would run (catalog_dereddened.fits would change)"),
            std::string::npos)
      << dry.output;
}

TEST(Run, PipelineRulesAreCheckedBeforeAnythingIsWritten) {
  // Issue 15 item 8 and 10: each of these was refused only after stages had written.
  const std::string demo = test::source_file("config/demo");
  struct Case {
    std::string extra, apply, rule, key;
  } cases[] = {
      {"", "", "config_value", "run.calibration"},  // the name, below
      {"",
       "[apply]\nrelation = \"W_XX\"\ntargets_ingest = \"" + demo +
           "/ingest_targets.toml\"\ntargets_deredden = \"" + demo + "/deredden_targets.toml\"\n",
       "unknown_relation", "apply.relation"},
  };
  for (std::size_t i = 0; i < 2; ++i) {
    test::TempDir dir;
    stage_catalog(dir);
    std::string cfg = pipeline_config(dir, cases[i].extra, 0, false) + cases[i].apply;
    if (i == 0)
      cfg = test::replaced(cfg, {{"calibration = \"test-cal\"", "calibration = \"../../x\""}});
    test::write_text(dir.file("pipeline.toml"), cfg);
    auto r = run(dir);
    EXPECT_EQ(r.exit_code, 2) << r.output;
    EXPECT_NE(r.output.find("[" + cases[i].rule + "]"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find(cases[i].key), std::string::npos) << r.output;
    EXPECT_FALSE(fs::exists(dir.file("run/catalog.fits"))) << i;
    EXPECT_FALSE(fs::exists(dir.file("x"))) << i;
  }
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"),
                   test::replaced(pipeline_config(dir), {{"bootstrap = 0", "bootstrap = -5"}}));
  auto r = run(dir);
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("bootstrap"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("not -5"), std::string::npos) << r.output;
}

TEST(Run, AWriteTheSystemRefusesExits7NamingTheReason) {
  // A file-size limit stands in for a full disk (EFBIG for ENOSPC): the input was fine, so
  // not exit 2 (issue 15: a full disk was reported as bad input).
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "", 0, false));
  auto r = test::run_command("ulimit -f 40; trap '' XFSZ; " +
                             test::shell_quote(std::string(RUNGCAL_BIN_DIR) + "/rungcal-run") +
                             " --config " + dir.file("pipeline.toml"));
  EXPECT_EQ(r.exit_code, 7) << r.output;
  EXPECT_NE(r.output.find("[write_failed]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("File too large"), std::string::npos) << r.output;
}

TEST(Run, TheReportsFigureWidthIsAKeyThatRerunsTheReport) {
  // Issue 20: [report] figure_width as rungcal-report's --figure-width; a new width redoes
  // the report and nothing else; an unknown one stops before anything is written.
  test::TempDir dir;
  stage_catalog(dir);
  const std::string with_report =
      test::replaced(pipeline_config(dir, "", 0, false), {{"enabled = false", "enabled = true"}});
  test::write_text(dir.file("pipeline.toml"), with_report);
  ASSERT_EQ(run(dir).exit_code, 6);
  test::write_text(dir.file("pipeline.toml"), with_report + "figure_width = \"column\"\n");
  auto dry = run(dir, "--dry-run");
  EXPECT_NE(dry.output.find("report: would run"), std::string::npos) << dry.output;
  EXPECT_EQ(dry.output.find("fit: would run"), std::string::npos) << dry.output;
  auto again = run(dir);
  EXPECT_EQ(again.exit_code, 0) << again.output;
  const std::string png = test::read_text(dir.file("run/report/pl_W_VI.png"));
  ASSERT_GT(png.size(), 24u);
  const auto be32 = [&](std::size_t at) {
    return (static_cast<unsigned>(static_cast<unsigned char>(png[at])) << 24) |
           (static_cast<unsigned>(static_cast<unsigned char>(png[at + 1])) << 16) |
           (static_cast<unsigned>(static_cast<unsigned char>(png[at + 2])) << 8) |
           static_cast<unsigned>(static_cast<unsigned char>(png[at + 3]));
  };
  EXPECT_EQ(be32(16), 1050u);  // 3.5 in at 300 dpi (the PNG header's width)
  test::TempDir bad;
  stage_catalog(bad);
  test::write_text(bad.file("pipeline.toml"),
                   test::replaced(pipeline_config(bad, "", 0, false),
                                  {{"enabled = false", "figure_width = \"a4\""}}));
  auto r = run(bad);
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("figure_width"), std::string::npos) << r.output;
  EXPECT_FALSE(fs::exists(bad.file("run")));
}

TEST(Run, BadPipelineConfigStopsBeforeAnythingIsWritten) {
  test::TempDir dir;
  stage_catalog(dir);
  test::write_text(dir.file("pipeline.toml"), pipeline_config(dir, "drift_alarm_sigmaa = 2"));
  auto r = run(dir);
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[unknown_config_key]"), std::string::npos) << r.output;
  EXPECT_FALSE(fs::exists(dir.file("run")));
  // A broken stage config stops the run before any stage runs, naming that file.
  test::write_text(dir.file("fit_bad.toml"), "[fit]\ninput = \"x.fits\"\nloss = \"quadratic\"\n");
  std::string cfg = pipeline_config(dir);
  cfg.replace(cfg.find(test::source_file("config/demo") + "/fit.toml"),
              (test::source_file("config/demo") + "/fit.toml").size(), dir.file("fit_bad.toml"));
  test::write_text(dir.file("pipeline.toml"), cfg);
  r = run(dir);
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("fit_bad.toml"), std::string::npos) << r.output;
  EXPECT_FALSE(fs::exists(dir.file("run/catalog.fits")));
}

}  // namespace
}  // namespace rungcal
