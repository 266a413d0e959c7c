// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/calibration/calibration.hpp"

namespace rungcal {

struct ParameterShift {
  std::string relation, parameter;
  double from = 0, to = 0, from_error = 0, to_error = 0;  // errors from the covariance (NaN: none)
  double shift = 0;                                       // to - from
  double shift_in_sigma = 0;  // shift / sqrt(from_error^2 + to_error^2) (NaN when both are 0)
};

struct InputChange {
  std::string what;  // "changed", "added", "removed"
  std::string path;  // the input's path in the newer version (else the older)
  std::string from_sha256, to_sha256;
};

struct CalibrationDiff {
  std::string from_label, to_label;
  std::vector<ParameterShift> shifts;
  std::vector<InputChange> inputs;
  bool config_changed = false;
  // Per relation: stars used by one version and not the other.
  std::vector<std::pair<std::string, std::vector<std::string>>> entered, left;
  // The largest |shift_in_sigma| (0 when none is defined).
  double max_shift_in_sigma() const;
};

CalibrationDiff diff_calibrations(const Calibration& from, const Calibration& to);
// The diff as a person reads it.
std::string format_diff(const CalibrationDiff& diff);

}  // namespace rungcal
