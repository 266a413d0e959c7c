// SPDX-License-Identifier: MIT
#pragma once

#include <string>

namespace rungcal {

enum class Verbosity { kQuiet, kNormal, kVerbose };

// Sets up the default spdlog logger for a stage: messages to stderr, with the stage name.
// On a terminal the normal level is info; without one (cron) it is warn, so a healthy
// unattended run prints nothing but its errors. log_file, when not empty, receives every
// message at debug level regardless.
void setup_logging(const std::string& stage, Verbosity verbosity, const std::string& log_file = "");

// Keeps freed heap memory in the process (glibc trim and mmap thresholds raised): stages
// that solve thousands of small problems (bootstrap) otherwise spend most of their time in
// page faults as glibc returns and re-maps the same buffers. Call once from a stage's main.
void keep_freed_memory_for_reuse();

// True when stderr is a terminal (progress bars and info messages are shown).
bool stderr_is_terminal();

}  // namespace rungcal
