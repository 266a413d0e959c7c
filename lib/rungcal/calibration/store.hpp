// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "rungcal/calibration/calibration.hpp"
#include "rungcal/core/file_lock.hpp"  // BusyError

namespace rungcal {

// A folder of versioned calibrations: STORE/NAME/vNNNN/ holds calibration.json (canonical),
// calibration.fits (the same content), the residuals and the config used, and never
// changes once made; STORE/NAME/latest is a symbolic link to the newest version, replaced
// atomically. Publishers of one name are serialised by a lock (STORE/NAME/.lock).
struct PublishOptions {
  std::string store;           // the store folder
  std::string name;            // calibration name: letters, digits, '-', '_', '.'
  std::string fit_path;        // rungcal-fit result (JSON)
  std::string residuals_path;  // its residuals FITS ("" = none)
  std::string config_path;     // the fit config ("" = none)
  double lock_wait_seconds = 60;  // wait this long for another publisher, then give up (exit 5)
  std::string check() const;
};

struct PublishOutcome {
  bool created = false;       // false: the content equals the latest version's
  int version = 0;            // the new version, or the latest one when unchanged
  std::string folder;
  nlohmann::json shifts;      // per relation and parameter: shift and shift / combined sigma
};

// Publishes a fit result as the next version of a calibration. Throws InputError for bad
// input, and BusyError when the lock cannot be had in time.
PublishOutcome publish_calibration(const PublishOptions& options);

// Loads "name@latest" or "name@N" from a store. Throws InputError ("unknown_calibration").
Calibration load_calibration(const std::string& store, const std::string& reference);

// Versions present in a store for a name, ascending.
std::vector<int> calibration_versions(const std::string& store, const std::string& name);


}  // namespace rungcal
