// SPDX-License-Identifier: MIT
// rungcal-report: paper tables and figures from published calibrations.
#include <cstdio>

#include "rungcal/core/stage_main.hpp"
#include "rungcal/report/report.hpp"
#include "rungcal/report/site.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Writes the tables and figures for a paper from one or more published calibration versions: "
      "the "
      "relations side by side and the per-star appendix in LaTeX (AASTeX), CSV and Markdown; "
      "period-luminosity "
      "diagrams, residual trends, versions side by side and light curves in PDF, PNG and SVG."};
  rungcal::CommonOptions common;
  rungcal::ReportOptions o;
  app.add_option("--store", o.store, "Calibration store folder")->required();
  app.add_option("--calibration", o.calibrations, "name@N or name@latest; several for side by side")
      ->required();
  app.add_option("--out", o.out_dir, "Folder for the tables and figures");
  app.add_option("--lightcurves", o.lightcurves,
                 "rungcal-lightcurve product: phased light curves and periodograms too");
  app.add_option("--star", o.stars,
                 "Stars whose light curves to draw (default: those with a kept periodogram)");
  std::string table_errors = "covariance";
  app.add_option(
      "--table-errors", table_errors,
      "Errors in the relation table: covariance, bootstrap, or both (bootstrap in parentheses)");
  std::string figure_width = "screen";
  app.add_option("--figure-width", figure_width,
                 "Draw the figures for: screen (10 in), column (3.5 in) or two_columns (7.1 in); "
                 "the journal widths "
                 "keep 8-9 pt labels and write 300 dpi PNGs");
  rungcal::SiteOptions site;
  std::string site_folder;
  app.add_option(
      "--site", site_folder,
      "Instead, write the status page of the calibration --calibration names (its name; a "
      "version is ignored) into this folder: index.html with its figures");
  app.add_option(
      "--run-folder", site.run_folder,
      "With --site: a rungcal-run folder, whose runs, refused rows and products the page lists");
  app.add_option("--drift-alarm-sigma", site.drift_alarm_sigma,
                 "With --site: mark versions that moved a parameter by more than this many sigma");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  common.silence_stdout_if_quiet();
  rungcal::setup_logging("report", common.verbosity(), common.log_file);

  return rungcal::run_stage("report", [&] {
    const auto errors = rungcal::kTableErrorsNames.parse(table_errors);
    if (!errors)
      throw rungcal::InputError(
          {"--table-errors", {}, {}}, "config_value",
          "'" + table_errors + "' is not one of: " + rungcal::kTableErrorsNames.choices());
    o.table_errors = *errors;
    const auto width = rungcal::kFigureWidthNames.parse(figure_width);
    if (!width)
      throw rungcal::InputError(
          {"--figure-width", {}, {}}, "config_value",
          "'" + figure_width + "' is not one of: " + rungcal::kFigureWidthNames.choices());
    o.figure_width = *width;
    if (!site_folder.empty()) {
      site.store = o.store;
      site.calibration = o.calibrations.front().substr(0, o.calibrations.front().find('@'));
      site.out_dir = site_folder;
      rungcal::SiteOutcome out = rungcal::write_site(site);
      std::printf("status page of %s (%d versions, %d figures): %s/index.html\n",
                  site.calibration.c_str(), out.versions, out.figures, site_folder.c_str());
      return rungcal::ExitCode::kSuccess;
    }
    rungcal::ReportOutcome out = rungcal::write_report(o);
    std::printf("%d tables and %d figures for %zu calibration version(s) in %s\n", out.tables,
                out.figures, o.calibrations.size(), o.out_dir.c_str());
    return rungcal::ExitCode::kSuccess;
  });
}
