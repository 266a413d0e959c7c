// SPDX-License-Identifier: MIT
#pragma once

// rungcal-run's parts, shared by its files (run.cpp reads the options and runs the chain;
// run_state.cpp keys the stages and keeps the run state; run_outcome.cpp says what a run
// did: the new version and its drift, the refused rows, the exit code, the summary line,
// the history record and the status page). Not an interface of its own: include run.hpp
// from outside the module.

#include <functional>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "rungcal/core/stage_files.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/run/run.hpp"

namespace rungcal::run_parts {

// One stage of the chain: what keys it, how it runs. Its files are the stage's own
// declaration (declared_files of its options), never listed here.
struct Stage {
  std::string name;
  std::string config;    // stage config file, keyed by its parsed content ("" = none)
  std::string settings;  // overrides and choices that key it too
  // The stage's declared_files, asked at its turn: a calibration version it reads exists
  // only once the stages before it ran.
  std::function<StageFiles()> declare;
  std::function<void()> run;
  bool uses_calibration = false;  // reads the version 'latest' names, set at its turn
  StageFiles files{};             // declare()'s answer at the stage's turn
};

// A product's path in the run folder.
std::string in_folder(const RunOptions& o, const std::string& name);

// SHA-256 of everything that decides a stage's products.
std::string stage_key(const Stage& s);

// The run folder's run_state.json: each stage's key and products when it last ran, and the
// calibration version the last finished run reported.
class RunState {
 public:
  explicit RunState(std::string path);

  // "" when the stage's record matches key and its products are all there unchanged, else
  // the reason it must run.
  std::string why_run(const Stage& s, const std::string& key) const;

  // The version of a calibration the last finished run reported, and its content hash:
  // {0, ""} when none (a state from before rungcal recorded it, too).
  std::pair<int, std::string> announced(const std::string& calibration) const;
  // Written only when it changes: a run with nothing new leaves the state as it was.
  void record_announced(const std::string& calibration, int version, const std::string& sha);

  // Records that s ran under key, with the hashes of its config, inputs and products.
  void record(const Stage& s, const std::string& key);

 private:
  // Names what differs from the record, for the log and --dry-run.
  static std::string changed_part(const Stage& s, const nlohmann::json& rec);

  std::string path_;
  nlohmann::json state_ = nlohmann::json::object();
};

// Whether the latest version is news: one no finished run has reported (a run killed
// between publishing and its summary leaves the report to the next run, which also catches
// a version published by hand). When it is, outcome gets the largest shift, in sigma, from
// the version last reported (else from the one the latest replaced). Returns the latest
// version's content hash.
std::string note_if_new(const RunOptions& o, const std::vector<int>& versions,
                        const std::pair<int, std::string>& announced, RunOutcome& outcome);

// Rows refused at ingest go into the outcome and the log (a warning, so cron mail shows it):
// a typo in a nightly catalog must not drop a star silently.
void note_refusals(const IngestResult& r, const IngestOptions& ingest, RunOutcome& outcome);

// The run's exit code: a drift alarm (4) before a new version (6), then whether any stage
// ran (0) or none did (3); a dry run says only whether anything would run.
ExitCode outcome_code(const RunOptions& o, const std::vector<std::string>& ran,
                      const RunOutcome& out);

// The one line for cron mail: what happened to the calibration, what ran, what was refused.
std::string summary_line(const RunOptions& o, const std::vector<std::string>& ran,
                         const std::vector<std::string>& skipped, const RunOutcome& out);

// Appends the run's record to run_history.json in the run folder.
void record_run(const RunOptions& o, int code, const std::string& summary);

// The status page, after a run that changed anything (and when it is missing).
void refresh_site(const RunOptions& o, const RunOutcome& outcome, bool ran_any);

}  // namespace rungcal::run_parts
