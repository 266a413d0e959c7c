// SPDX-License-Identifier: MIT
#pragma once

#include <string>

#include "rungcal/calibration/calibration.hpp"

namespace rungcal {

// Loads a calibration named any of the ways a person names one:
//   "STORE/NAME@latest", "STORE/NAME@N"  a store folder, a calibration name and a version;
//   "STORE/NAME"                         the same at its 'latest' link;
//   "STORE/NAME/vNNNN", ".../latest"     a version folder (its calibration.json);
//   "path/calibration.json"              a calibration file wherever it lies.
// Throws InputError: "unknown_calibration" (no such file, folder, store, name or version),
// "not_a_calibration" (a JSON file of another schema), and the schema rules of
// check_calibration_document.
Calibration load_calibration_reference(const std::string& reference);

// Reads a calibration file (calibration.json), checked as load_calibration checks one.
Calibration read_calibration_file(const std::string& path);

}  // namespace rungcal
