// SPDX-License-Identifier: MIT
#pragma once

#include <map>
#include <string>
#include <vector>

#include "rungcal/core/error.hpp"
#include "rungcal/report/report.hpp"

namespace rungcal {

// One pipeline config (docs/operations.md): which stages run, with which configs, into which
// run folder, publishing to which store.
struct RunOptions {
  std::string config_file;  // the pipeline config, for messages
  std::string config_sha256;
  std::string folder;              // run folder: stage products, run_state.json, logs/
  std::string store;               // calibration store (default: folder/store)
  std::string calibration;         // calibration name published to
  double lock_wait_seconds = 600;  // wait this long for another run, then exit 5 (busy)
  double drift_alarm_sigma = 3.0;  // a new version moving any parameter more than this: exit 4
  std::size_t log_rotate_bytes = 5u << 20;  // rotating log in folder/logs/rungcal-run.log
  std::size_t log_files = 5;

  // Stage configs ("" = the stage is not run). ingest, deredden and fit are required.
  std::string lightcurve_config;
  std::string ingest_config;
  std::string ingest_input;  // overrides the ingest config's [source] path
  std::string deredden_config;
  std::string fit_config;
  int fit_bootstrap = -1;   // overrides the fit config's bootstrap and joint_bootstrap (-1: keep)
  std::string grid_config;  // systematics grid ("" = none): its budget joins the report
  bool report = true;       // tables and figures of the latest version (and the one before)
  // [report] figure_width and table_errors: as rungcal-report's --figure-width and --table-errors.
  FigureWidth report_figure_width = FigureWidth::kScreen;
  TableErrors report_table_errors = TableErrors::kCovariance;
  std::string apply_relation;  // "" = no distances
  // [apply] grid_skip_categories: categories of the grid's budget left out of the distances'
  // systematic error (ApplyOptions::grid_skip_categories).
  std::vector<std::string> apply_grid_skip_categories;
  std::string targets_ingest_config;
  std::string targets_deredden_config;
  bool republish_withdrawn = false;  // publish a fit whose content is a withdrawn version's
  bool site =
      true;  // write folder/site/index.html (the status page) after runs that changed anything

  bool dry_run = false;  // say what would run and why; run nothing
  bool force = false;    // run every stage whatever changed

  // "" when usable, else "field: rule".
  std::string check() const;
};

// Reads a pipeline config ([run], [lightcurve], [ingest], [deredden], [fit], [report],
// [apply]); unknown keys stop with rule "unknown_config_key".
RunOptions run_options_from_file(const std::string& path);

// Throws InputError (rule "run_folder_not_a_folder") when the run folder's path exists and
// is not a folder; with create, makes the folder and its logs/ when missing ("write_failed",
// with the system's reason, when it cannot).
void check_run_folder(const RunOptions& o, bool create = true);

// What happened to one stage.
struct StageReport {
  std::string name;
  bool ran = false;
  std::string reason;  // why it ran ("config changed", "input ... changed", ...) or "up to date"
};

struct RunOutcome {
  ExitCode code = ExitCode::kSuccess;
  std::vector<StageReport> stages;
  bool new_version = false;
  int version = 0;                  // the latest version after the run (0 = none)
  double max_shift_sigma = 0;       // largest |shift| / combined sigma of the new version
  std::string max_shift_parameter;  // "relation parameter" of that shift
  bool first_version = false;       // the new version has no version before it to compare
  int rolled_back_from = 0;         // the version the last run reported, when latest is older
  int withheld_version = 0;         // a withdrawn version the fit reproduced (not republished)
  std::size_t rows_read = 0;        // ingest (when it ran): rows read and rows refused
  std::size_t rows_refused = 0;
  std::string first_refusals;  // the first few refused rows and their rules
  std::string summary;         // one line for cron mail
};

// Reads and checks every stage config the pipeline config names, writing nothing: what
// rungcal-run does first, before it makes the run folder (issue 15: validate everything
// before writing anything). Throws InputError.
void check_pipeline(const RunOptions& options);

// Runs the chain in order, each stage only when the hash of its config and inputs changed
// (or its products are missing), under an exclusive lock on the run folder. Stage products
// are written atomically and the run state after each stage, so a killed run loses at most
// the stage it was in. Throws InputError (bad input, exit 2) and BusyError (exit 5).
RunOutcome run_pipeline(const RunOptions& options);

}  // namespace rungcal
