// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>

#include "rungcal/core/error.hpp"

namespace rungcal {

// Why the last stage run in this process stopped, beyond its exit code: for callers that run
// a stage's main inside their own process (the Python module's run_stage) and hand the rule,
// file and key on rather than the log line. run_stage and parse_command_line (stage_main.hpp)
// remember every failure they turn into an exit code.
struct StageFailure {
  ExitCode code = ExitCode::kInternalError;
  std::string rule;     // the InputError's rule; "command_line", "busy" or "internal_error" else
  InputLocation where;  // file, row and column or key, as the error named them
  std::string detail;   // the message without its location
  std::string message;  // the whole message, as logged
};

void remember_stage_failure(StageFailure failure);

// The failure remembered last (nullopt when none since the previous call); forgets it.
std::optional<StageFailure> take_stage_failure();

}  // namespace rungcal
