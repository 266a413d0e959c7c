// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/core/stage_files.hpp"
#include "rungcal/report/figures.hpp"
#include "rungcal/report/tables.hpp"

namespace rungcal {

struct ReportOptions {
  std::string store;                      // calibration store folder
  std::vector<std::string> calibrations;  // "name@N" or "name@latest", side by side in this order
  std::string out_dir = "out/report";     // folder for the tables and figures
  std::string lightcurves;         // rungcal-lightcurve product ("" = no light-curve figures)
  std::vector<std::string> stars;  // light curves to draw; empty = those with a kept periodogram
  std::string grid;                // rungcal-grid result (grid.json): the error budget table too
  TableErrors table_errors = TableErrors::kCovariance;  // errors in the relation table
  FigureWidth figure_width = FigureWidth::kScreen;      // the width the figures are drawn for

  // "" when usable, else "field: rule".
  std::string check() const;
};

// What the report reads: each calibration version named (those the store has), the last
// one's residuals, the light-curve product and the grid's budget (when given); what it
// writes: every file in out_dir, named as it runs (output_folder).
StageFiles declared_files(const ReportOptions& options);

struct ReportOutcome {
  int tables = 0;
  int figures = 0;
};

// Writes relations.{tex,csv,md}, the per-star appendix of the last version, the PL,
// residual and version figures, the light curves, and the error budget
// (docs/file-formats.md, "Paper tables").
ReportOutcome write_report(const ReportOptions& options);

}  // namespace rungcal
