// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>
#include <string>

namespace rungcal {

enum class Verbosity { kQuiet, kNormal, kVerbose };

// Sets up the default spdlog logger for a stage: messages to stderr, with the stage name.
// On a terminal the normal level is info; without one (cron) it is warn, so a healthy
// unattended run prints nothing but its errors. log_file, when not empty, receives every
// message at debug level regardless; with rotate_bytes > 0 it rotates at that size,
// keeping rotate_files old files (log_file.1, .2, ...), for unattended runs.
void setup_logging(const std::string& stage, Verbosity verbosity, const std::string& log_file = "",
                   std::size_t rotate_bytes = 0, std::size_t rotate_files = 5);

// A log file that cannot be opened (a symlink, a folder, no permission) is not thrown from
// setup_logging, which stage mains call before run_stage: it is kept and thrown by this
// (InputError), which run_stage calls first.
void throw_deferred_logging_error();

// Keeps freed heap memory in the process (glibc trim and mmap thresholds raised): stages
// that solve thousands of small problems (bootstrap) otherwise spend most of their time in
// page faults as glibc returns and re-maps the same buffers. Call once from a stage's main.
void keep_freed_memory_for_reuse();

// True when stderr is a terminal (progress bars and info messages are shown).
bool stderr_is_terminal();

}  // namespace rungcal
