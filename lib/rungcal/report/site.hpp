// SPDX-License-Identifier: MIT
#pragma once

#include <string>

namespace rungcal {

// The status page of a calibration, for a group that watches nightly runs: plain HTML, CSS
// and SVG, no script and nothing from the network, so it works from file:// and behind any
// web server (docs/operations.md, "The status page").
struct SiteOptions {
  std::string store;               // calibration store folder
  std::string calibration;         // calibration name
  std::string out_dir;             // the page's folder (index.html, site.css, figures)
  std::string run_folder;          // a rungcal-run folder: runs, refused rows, products ("" = none)
  double drift_alarm_sigma = 3.0;  // a shift beyond this, in sigma, is marked as a drift alarm
  std::size_t max_versions = 60;   // the newest versions shown in the history
  std::size_t max_runs = 20;       // the newest runs listed

  // "" when usable, else "field: rule".
  std::string check() const;
};

struct SiteOutcome {
  int versions = 0;  // versions in the history
  int figures = 0;
};

// Writes out_dir/index.html and its assets. Every file is written atomically and the page
// last, so a reader never sees a half-written page, nor one that names a missing figure.
// Throws InputError (a store without the calibration) and WriteError.
SiteOutcome write_site(const SiteOptions& options);

}  // namespace rungcal
