// SPDX-License-Identifier: MIT
// rungcal-run: the whole chain from one pipeline config, for cron and systemd timers.
#include <cstdio>
#include <filesystem>

#include <spdlog/spdlog.h>

#include "rungcal/core/log.hpp"
#include "rungcal/core/stage_main.hpp"
#include "rungcal/run/run.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Runs the configured stages in order (light curves, ingest, deredden, fit, publish, report, "
      "apply), "
      "each only when its config or inputs changed, under a lock, and ends with one summary line. "
      "Exit codes: 0 ran (calibration unchanged), 3 nothing changed, 6 new calibration (or latest "
      "rolled back), 4 drift alarm, 5 busy, 2 bad input, 7 cannot write, 1 internal error."};
  rungcal::CommonOptions common;
  std::string config_path;
  bool dry_run = false, force = false;
  app.add_option("--config", config_path, "Pipeline config (TOML)")->required();
  app.add_flag("--dry-run", dry_run, "List what would run and why; run nothing");
  app.add_flag("--force", force, "Rerun every stage");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  common.silence_stdout_if_quiet();
  // The log file needs the run folder from the config: console first, then the rotating file.
  rungcal::setup_logging("run", common.verbosity(), common.log_file);

  return rungcal::run_stage("run", [&] {
    rungcal::RunOptions options = rungcal::run_options_from_file(config_path);
    options.dry_run = dry_run;
    options.force = force;
    rungcal::check_pipeline(options);  // before the run folder and its log are made
    rungcal::check_run_folder(options);
    rungcal::setup_logging(
        "run", common.verbosity(),
        (std::filesystem::path(options.folder) / "logs" / "rungcal-run.log").string(),
        options.log_rotate_bytes, options.log_files);
    rungcal::throw_deferred_logging_error();
    rungcal::RunOutcome out = rungcal::run_pipeline(options);
    spdlog::debug("{}", out.summary);
    // A dry run's reasons are what was asked for: on stdout, with or without a terminal.
    if (dry_run)
      for (const auto& s : out.stages)
        std::printf("%s: %s\n", s.name.c_str(),
                    s.ran ? ("would run (" + s.reason + ")").c_str() : "up to date");
    std::printf("%s\n", out.summary.c_str());
    return out.code;
  });
}
