// SPDX-License-Identifier: MIT
#pragma once

#include <functional>
#include <string>
#include <vector>

#include <CLI/CLI.hpp>
#include <nlohmann/json.hpp>

#include "rungcal/core/error.hpp"
#include "rungcal/core/log.hpp"

namespace rungcal {

// Options every stage takes.
struct CommonOptions {
  bool quiet = false;    // warnings and errors only
  bool verbose = false;  // debug messages too
  std::string log_file;  // also log everything here
  void add_to(CLI::App& app);
  Verbosity verbosity() const;
  // With --quiet, the summary a stage prints on stdout goes too (to /dev/null): -q means
  // nothing but warnings and errors. Stages whose stdout is what was asked for (rungcal-diff,
  // an extinction table) do not call it.
  void silence_stdout_if_quiet() const;
};

// Runs a stage's body and turns its outcome into the documented exit code: WriteError ->
// 7 (cannot_write), InputError -> 2 (bad_input) with its message, BusyError -> 5 (busy), any
// other exception -> 1 (internal_error). The body
// returns its own code for the other outcomes.
int run_stage(const std::string& stage, const std::function<ExitCode()>& body);

// Parses the command line; on --help prints and returns 0, on a bad command line prints
// the reason and returns 2. Returns -1 when the stage should go on.
int parse_command_line(CLI::App& app, int argc, char** argv);

// Every option's value after parsing, by its long name (flags as booleans, the rest as the
// text given or the default), less --help, --version and the names in leave_out: what a
// product records so that two runs can be told to be of one setup.
nlohmann::json command_line_settings(const CLI::App& app,
                                     const std::vector<std::string>& leave_out);

}  // namespace rungcal
