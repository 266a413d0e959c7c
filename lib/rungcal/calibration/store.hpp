// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "rungcal/calibration/calibration.hpp"
#include "rungcal/core/file_lock.hpp"  // BusyError
#include "rungcal/core/stage_files.hpp"

namespace rungcal {

// A folder of versioned calibrations: STORE/NAME/vNNNN/ holds calibration.json (canonical),
// calibration.fits (the same content), the residuals and the config used, and never
// changes once made; STORE/NAME/latest is a symbolic link to the newest version, replaced
// atomically. Publishers of one name are serialised by a lock (STORE/NAME/.lock).
struct PublishOptions {
  std::string store;                 // the store folder
  std::string name;                  // calibration name: letters, digits, '-', '_', '.'
  std::string fit_path;              // rungcal-fit result (JSON)
  std::string residuals_path;        // its residuals FITS ("" = none)
  std::string config_path;           // the fit config ("" = none)
  double lock_wait_seconds = 60;     // wait this long for another publisher, then give up (exit 5)
  bool republish_withdrawn = false;  // publish content equal to a withdrawn version's anyway
  std::string check() const;
};

// "" when a calibration name is safe as a folder name, else the rule it breaks.
std::string check_calibration_name(const std::string& name);

struct PublishOutcome {
  bool created = false;     // false: the content equals the latest or a withdrawn version's
  int version = 0;          // the new version, or the latest one when unchanged
  int withdrawn_match = 0;  // the withdrawn version whose content this is (0 = none)
  std::string folder;
  nlohmann::json shifts;  // per relation and parameter: shift and shift / combined sigma
};

// Rolling back. 'latest' is what every reader downstream uses (apply, report, rungcal-run).
// A version newer than the one 'latest' names is withdrawn: pointed away from by
// set_latest_version, or by hand (the next publisher notices and records it). Withdrawn
// versions stay in the store, listed in STORE/NAME/withdrawn.json, and their content is
// not published again unless PublishOptions::republish_withdrawn asks for it.
struct WithdrawnVersion {
  int version = 0;
  std::string content_sha256;
  std::string withdrawn_utc;  // when it was withdrawn, or first noticed withdrawn
};

// The versions withdrawn from a calibration, ascending; never the one 'latest' names.
std::vector<WithdrawnVersion> withdrawn_versions(const std::string& store, const std::string& name);

// Points 'latest' at an existing version, under the publishers' lock: the versions above it
// become withdrawn, and a withdrawn version pointed at is reinstated. Throws InputError
// ("unknown_calibration") for a version that is not there, BusyError when the lock is held.
void set_latest_version(const std::string& store, const std::string& name, int version,
                        double lock_wait_seconds);

// The version 'latest' names (nullopt when none).
std::optional<int> latest_version(const std::string& store, const std::string& name);

// Publishes a fit result as the next version of a calibration. Throws InputError for bad
// input, and BusyError when the lock cannot be had in time.
PublishOutcome publish_calibration(const PublishOptions& options);

// Loads "name@latest" or "name@N" from a store. Throws InputError ("unknown_calibration").
Calibration load_calibration(const std::string& store, const std::string& reference);

// Versions present in a store for a name, ascending.
std::vector<int> calibration_versions(const std::string& store, const std::string& name);

// STORE/NAME: a calibration's versions, its 'latest' link and its lock.
std::string calibration_folder(const std::string& store, const std::string& name);
// STORE/NAME/vNNNN/calibration.json for a reference ("name@N", "name@latest" or "name"),
// without reading it: "" when the reference names no version there (yet).
std::string calibration_file(const std::string& store, const std::string& reference);

// What publishing reads (the fit result, its residuals and its config, when given) and
// changes: the calibration's folder in the store, shared with other publishers (adds_to).
StageFiles declared_files(const PublishOptions& options);

}  // namespace rungcal
