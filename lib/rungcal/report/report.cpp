// SPDX-License-Identifier: MIT
#include "rungcal/report/report.hpp"
#include "rungcal/core/json_io.hpp"

#include <filesystem>
#include <fstream>

#include <nlohmann/json.hpp>

#include <fmt/format.h>

#include "rungcal/calibration/store.hpp"
#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/report/figures.hpp"
#include "rungcal/report/tables.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {
namespace {

std::string residuals_of(const std::string& store, const Calibration& c) {
  return store + "/" + c.name() + "/" + fmt::format("v{:04d}", c.version()) + "/fit_residuals.fits";
}

constexpr FigureFormat kFigureFormats[] = {FigureFormat::kPdf, FigureFormat::kPng,
                                           FigureFormat::kSvg};

}  // namespace

std::string ReportOptions::check() const {
  if (store.empty()) return "store: required";
  if (calibrations.empty()) return "calibration: at least one";
  if (out_dir.empty()) return "out: required";
  return "";
}

ReportOutcome write_report(const ReportOptions& o) {
  throw_if_invalid(o.check(), "rungcal-report");
  ReportOutcome outcome;
  std::vector<Calibration> versions;
  for (const auto& c : o.calibrations) versions.push_back(load_calibration(o.store, c));
  const Calibration& last = versions.back();
  const std::string residuals = residuals_of(o.store, last);
  const bool have_residuals = std::filesystem::exists(residuals);
  StarTable res;
  if (have_residuals) res = read_fits_table(residuals, {"RESIDUALS", 0}).table;

  const char* ext[] = {"tex", "csv", "md"};
  for (auto f : {TableFormat::kLatex, TableFormat::kCsv, TableFormat::kMarkdown}) {
    const std::string e = ext[static_cast<int>(f)];
    write_file_atomically(o.out_dir + "/relations." + e, relation_table(versions, f));
    ++outcome.tables;
    if (!have_residuals) continue;
    // Per-star appendix of the last version, from the residuals kept with it.
    for (const auto& rel : last.relation_names()) {
      write_file_atomically(o.out_dir + "/stars_" + rel + "." + e, star_table(res, rel, f));
      ++outcome.tables;
    }
  }
  if (!o.grid.empty()) {
    const nlohmann::json budget = read_json_file(o.grid);  // depth-capped (issue 15)
    if (!(budget.is_object() && budget.contains("schema") &&
          budget.at("schema") == "rungcal-error-budget"))
      throw InputError({o.grid, {}, "schema"}, "not_a_grid_result", "not a rungcal-grid result");
    for (auto f : {TableFormat::kLatex, TableFormat::kCsv, TableFormat::kMarkdown}) {
      write_file_atomically(o.out_dir + "/error_budget." + ext[static_cast<int>(f)],
                            error_budget_table(budget, f));
      ++outcome.tables;
    }
  }
  for (auto f : kFigureFormats) {
    const std::string e(kFigureFormatNames.name(f));
    for (const auto& rel : last.relation_names()) {
      if (have_residuals) {
        pl_diagram(last, rel, res, f, o.out_dir + "/pl_" + rel + "." + e);
        residual_trends(last, rel, res, f, o.out_dir + "/residuals_" + rel + "." + e);
        outcome.figures += 2;
      }
      if (versions.size() > 1) {
        version_trend(versions, rel, f, o.out_dir + "/versions_" + rel + "." + e);
        ++outcome.figures;
      }
    }
  }
  if (!o.lightcurves.empty()) {
    LightCurveTables lc = read_lightcurve_tables(o.lightcurves);
    std::vector<std::string> stars = o.stars;
    if (stars.empty())
      for (std::size_t i = 0; i < lc.periodogram.rows(); ++i)
        if (stars.empty() || stars.back() != lc.periodogram.column("id").text[i])
          stars.push_back(lc.periodogram.column("id").text[i]);
    for (auto f : kFigureFormats)
      for (const auto& star : stars) {
        light_curve_figure(
            lc, star, f,
            o.out_dir + "/lightcurve_" + star + "." + std::string(kFigureFormatNames.name(f)));
        ++outcome.figures;
      }
  }
  return outcome;
}

}  // namespace rungcal
