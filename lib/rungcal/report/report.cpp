// SPDX-License-Identifier: MIT
#include "rungcal/report/report.hpp"
#include "rungcal/core/json_io.hpp"

#include <filesystem>
#include <fstream>
#include <optional>

#include <nlohmann/json.hpp>

#include <fmt/format.h>

#include "rungcal/calibration/store.hpp"
#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/file_names.hpp"
#include "rungcal/report/figures.hpp"
#include "rungcal/report/tables.hpp"
#include "rungcal/table/error_budget_schema.hpp"
#include "rungcal/table/fit_residuals_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/lightcurve_schema.hpp"

namespace rungcal {
namespace {

// The residuals published beside a version's calibration.json.
std::string residuals_beside(const std::string& calibration_json) {
  return (std::filesystem::path(calibration_json).parent_path() / kFitResidualsFileName).string();
}

std::string residuals_of(const std::string& store, const Calibration& c) {
  return residuals_beside(calibration_file(store, fmt::format("{}@{}", c.name(), c.version())));
}

}  // namespace

StageFiles declared_files(const ReportOptions& o) {
  StageFiles f;
  for (const auto& c : o.calibrations) f.add_input(calibration_file(o.store, c));
  if (!o.calibrations.empty())
    if (const std::string last = calibration_file(o.store, o.calibrations.back()); !last.empty())
      f.add_input(residuals_beside(last));
  f.add_input(o.lightcurves);
  f.add_input(o.grid);
  f.output_folder = o.out_dir;
  return f;
}

std::string ReportOptions::check() const {
  if (store.empty()) return "store: required";
  if (calibrations.empty()) return "calibration: at least one";
  if (out_dir.empty()) return "out: required";
  return "";
}

namespace {

// Everything a report reads, read and checked before the first file is written: a bad
// --star or --lightcurves stops the report with nothing half-made.
struct ReportInputs {
  std::vector<Calibration> versions;
  StarTable residuals;
  bool have_residuals = false;
  std::optional<nlohmann::json> budget;
  std::optional<LightCurveTables> light_curves;
  std::vector<std::string> stars;
};

ReportInputs read_report_inputs(const ReportOptions& o) {
  ReportInputs in;
  for (const auto& c : o.calibrations) in.versions.push_back(load_calibration(o.store, c));
  const std::string residuals = residuals_of(o.store, in.versions.back());
  in.have_residuals = std::filesystem::exists(residuals);
  if (in.have_residuals)
    in.residuals = read_fits_table(residuals, {residuals_hdu::kResiduals, 0}).table;
  if (!o.grid.empty()) {
    in.budget = read_json_file(o.grid);               // depth-capped (issue 15)
    check_error_budget_document(*in.budget, o.grid);  // every key the budget table reads
  }
  if (o.lightcurves.empty()) {
    if (!o.stars.empty())
      throw InputError(
          {"rungcal-report", {}, "--star"}, "needs_lightcurves",
          "--star draws a light curve: give the light-curve product with --lightcurves");
    return in;
  }
  in.light_curves = read_lightcurve_tables(o.lightcurves);
  const StarTable& pg = in.light_curves->periodogram;
  in.stars = o.stars;
  if (in.stars.empty())
    for (std::size_t i = 0; i < pg.rows(); ++i)
      if (in.stars.empty() || in.stars.back() != pg.column(lightcurve_col::kId).text[i])
        in.stars.push_back(pg.column(lightcurve_col::kId).text[i]);
  for (const auto& star : in.stars)
    if (auto why = light_curve_star_problem(*in.light_curves, star); !why.empty())
      throw InputError({o.lightcurves, {}, star, "row", "star"}, "no_rows_left", why);
  return in;
}

// out_dir/prefix + part + "." + ext, with part (a star id or relation name, from data)
// made safe: it can never name a file outside out_dir (issue 15).
std::string report_file(const ReportOptions& o, const std::string& prefix, const std::string& part,
                        const std::string& ext) {
  return o.out_dir + "/" + prefix + file_name_part(part) + "." + ext;
}

}  // namespace

ReportOutcome write_report(const ReportOptions& o) {
  throw_if_invalid(o.check(), "rungcal-report");
  const ReportInputs in = read_report_inputs(o);
  ReportOutcome outcome;
  const Calibration& last = in.versions.back();

  for (const auto& [f, extension] : kTableFormatExtensions.entries) {
    const std::string e(extension);
    write_file_atomically(o.out_dir + "/relations." + e,
                          relation_table(in.versions, f, o.table_errors));
    ++outcome.tables;
    if (in.budget) {
      write_file_atomically(o.out_dir + "/error_budget." + e, error_budget_table(*in.budget, f));
      ++outcome.tables;
    }
    if (!in.have_residuals) continue;
    // Per-star appendix of the last version, from the residuals kept with it.
    for (const auto& rel : last.relation_names()) {
      write_file_atomically(report_file(o, "stars_", rel, e), star_table(in.residuals, rel, f));
      ++outcome.tables;
    }
  }
  for (const auto& [f, extension] : kFigureFormatNames.entries) {
    const std::string e(extension);
    for (const auto& rel : last.relation_names()) {
      if (in.have_residuals) {
        pl_diagram(last, rel, in.residuals, f, report_file(o, "pl_", rel, e), o.figure_width);
        residual_trends(last, rel, in.residuals, f, report_file(o, "residuals_", rel, e),
                        o.figure_width);
        outcome.figures += 2;
      }
      if (in.versions.size() > 1) {
        version_trend(in.versions, rel, f, report_file(o, "versions_", rel, e), o.figure_width);
        ++outcome.figures;
      }
    }
    for (const auto& star : in.stars) {
      light_curve_figure(*in.light_curves, star, f, report_file(o, "lightcurve_", star, e),
                         o.figure_width);
      ++outcome.figures;
    }
  }
  return outcome;
}

}  // namespace rungcal
