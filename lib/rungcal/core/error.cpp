// SPDX-License-Identifier: MIT
#include "rungcal/core/error.hpp"

#include <fmt/format.h>

namespace rungcal {

const char* exit_code_name(ExitCode code) {
  switch (code) {
    case ExitCode::kSuccess:
      return "success";
    case ExitCode::kInternalError:
      return "internal_error";
    case ExitCode::kBadInput:
      return "bad_input";
    case ExitCode::kNothingToDo:
      return "nothing_to_do";
    case ExitCode::kDriftAlarm:
      return "drift_alarm";
    case ExitCode::kBusy:
      return "busy";
    case ExitCode::kNewCalibration:
      return "new_calibration";
    case ExitCode::kCannotWrite:
      return "cannot_write";
  }
  return "unknown";
}

std::string format_input_error(const InputLocation& where, const std::string& rule,
                               const std::string& message) {
  std::string out;
  if (!where.file.empty()) out += where.file;
  if (where.row) out += fmt::format("{}{} {}", out.empty() ? "" : ":", where.row_label, *where.row);
  if (!where.column.empty())
    out += fmt::format("{}{} '{}'", out.empty() ? "" : ": ", where.column_label, where.column);
  if (!out.empty()) out += ": ";
  out += fmt::format("[{}] {}", rule, message);
  return out;
}

void throw_if_invalid(const std::string& check_result, const std::string& file,
                      const std::string& key_prefix) {
  if (check_result.empty()) return;
  const auto colon = check_result.find(':');
  const std::string field = check_result.substr(0, colon);
  const std::string rule =
      colon == std::string::npos ? check_result : check_result.substr(colon + 1);
  throw InputError({file, {}, key_prefix + field, "line", "key"}, "config_value",
                   rule.empty() || rule[0] != ' ' ? rule : rule.substr(1));
}

InputError::InputError(InputLocation where, std::string rule, std::string message)
    : std::runtime_error(format_input_error(where, rule, message)),
      where_(std::move(where)),
      rule_(std::move(rule)),
      detail_(std::move(message)) {}

}  // namespace rungcal
