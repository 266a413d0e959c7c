// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include <CLI/CLI.hpp>

#include "rungcal/core/error.hpp"
#include "rungcal/simulate/study.hpp"
#include "rungcal/simulate/study_setup.hpp"

namespace rungcal {

// rungcal-study's command line: what its options fill.
struct StudyCommandLine {
  StudyOptions study;                // the numeric settings, straight from their options
  StudyChoices choice;               // the settings chosen by name (apply_study_choices)
  std::string out;                   // also write the summary and every mock's figures here
  std::vector<std::string> combine;  // fit nothing: pool these runs' --out files
  std::vector<std::string> paired;   // fit nothing: A.json B.json, one change apart
};

// Declares rungcal-study's options on app, each filling a field of line (the study's own
// defaults shown in --help).
void add_study_options(CLI::App& app, StudyCommandLine& line);

// Runs what the parsed command line asks (draw and fit mocks, pool runs, or pair two) and
// prints its table; app gives the settings a run records so that runs of one setup pool.
ExitCode run_study_command(const StudyCommandLine& line, const CLI::App& app);

}  // namespace rungcal
