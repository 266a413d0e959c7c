// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <optional>
#include <stdexcept>
#include <string>

namespace rungcal {

// One exit-code table for every stage (docs/exit-codes.md). Values are stable: scripts and
// cron jobs test them.
enum class ExitCode : int {
  kSuccess = 0,        // the stage did its work
  kInternalError = 1,  // a broken invariant inside rungcal: a bug, please report it
  kBadInput = 2,       // bad input data, bad config or bad command line; nothing was written
  kNothingToDo = 3,    // inputs unchanged since the last product; nothing was rewritten
  kDriftAlarm = 4,     // a new calibration moved beyond the configured alarm threshold
  kBusy = 5,           // another process holds the lock and the wait ran out
  kNewCalibration =
      6,  // rungcal-run published a new calibration version (within the drift threshold)
  kCannotWrite =
      7,  // the system refused a write (disk full, permission, I/O): not the input's fault
};

// Short machine name of an exit code, as printed in logs ("bad_input").
const char* exit_code_name(ExitCode code);

// Where in the input a problem sits. Every field is optional; what is known is printed.
struct InputLocation {
  std::string file;                     // path as the user gave it
  std::optional<std::int64_t> row;      // 1-based line (text files) or row (FITS)
  std::string column;                   // input column name or config key
  std::string row_label = "row";        // "line" for text files and configs
  std::string column_label = "column";  // "key" for config keys
};

// Bad input or configuration: the user can fix it. Carries the broken rule's short name
// (e.g. "duplicate_id") so tests and scripts can match it without parsing prose.
class InputError : public std::runtime_error {
 public:
  InputError(InputLocation where, std::string rule, std::string message);

  const InputLocation& where() const { return where_; }
  const std::string& rule() const { return rule_; }
  const std::string& detail() const { return detail_; }

 private:
  InputLocation where_;
  std::string rule_;
  std::string detail_;
};

// A write the system refused (ENOSPC, EACCES, EIO, ...): the input was fine, the machine
// was not, so it exits 7 (cannot_write), not 2; the message names the file and the errno.
// Still an InputError, rule "write_failed", for code that handles both alike.
class WriteError : public InputError {
 public:
  WriteError(InputLocation where, std::string message)
      : InputError(std::move(where), "write_failed", std::move(message)) {}
};

// Turns an options check() result ("field: rule", "" when fine) into InputError
// (rule "config_value") naming the config file and the key (key_prefix + field).
void throw_if_invalid(const std::string& check_result, const std::string& file,
                      const std::string& key_prefix = "");

// Formats "file:row N: column 'c': [rule] message", leaving out what is unknown.
std::string format_input_error(const InputLocation& where, const std::string& rule,
                               const std::string& message);

}  // namespace rungcal
