// SPDX-License-Identifier: MIT
// rungcal-report: paper tables from published calibrations.
#include <cstdio>
#include <filesystem>

#include <spdlog/spdlog.h>

#include "rungcal/calibration/store.hpp"
#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/stage_main.hpp"
#include "rungcal/report/figures.hpp"
#include "rungcal/report/tables.hpp"
#include "rungcal/table/fits_io.hpp"

int main(int argc, char** argv) {
  CLI::App app{"Writes the tables and figures for a paper from one or more published calibration versions: the "
               "relations side by side and the per-star appendix in LaTeX (AASTeX), CSV and Markdown; period-luminosity "
               "diagrams, residual trends, versions side by side and light curves in PDF, PNG and SVG."};
  rungcal::CommonOptions common;
  std::string store, out_dir = "out/report";
  std::vector<std::string> calibrations, lc_stars;
  std::string lightcurves;
  app.add_option("--store", store, "Calibration store folder")->required();
  app.add_option("--calibration", calibrations, "name@N or name@latest; several for side by side")->required();
  app.add_option("--out", out_dir, "Folder for the tables");
  app.add_option("--lightcurves", lightcurves, "rungcal-lightcurve product: phased light curves and periodograms too");
  app.add_option("--star", lc_stars, "Stars whose light curves to draw (default: those with a kept periodogram)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("report", common.verbosity(), common.log_file);

  return rungcal::run_stage("report", [&] {
    std::vector<rungcal::Calibration> versions;
    for (const auto& c : calibrations) versions.push_back(rungcal::load_calibration(store, c));
    const char* ext[] = {"tex", "csv", "md"};
    for (auto f : {rungcal::TableFormat::kLatex, rungcal::TableFormat::kCsv, rungcal::TableFormat::kMarkdown}) {
      std::string e = ext[static_cast<int>(f)];
      rungcal::write_file_atomically(out_dir + "/relations." + e, rungcal::relation_table(versions, f));
      // Per-star appendix of the last version given, from the residuals kept with it.
      const rungcal::Calibration& last = versions.back();
      std::string residuals = store + "/" + last.name() + "/" + fmt::format("v{:04d}", last.version()) + "/fit_residuals.fits";
      if (!std::filesystem::exists(residuals)) continue;
      rungcal::SourceTable res = rungcal::read_fits_table(residuals, {"RESIDUALS", 0});
      for (const auto& rel : last.relation_names())
        rungcal::write_file_atomically(out_dir + "/stars_" + rel + "." + e, rungcal::star_table(res.table, rel, f));
    }
    // Figures: the period-luminosity diagram of each relation of the last version, and the
    // zero point and offset version by version when several versions are given.
    const rungcal::Calibration& last = versions.back();
    std::string residuals = store + "/" + last.name() + "/" + fmt::format("v{:04d}", last.version()) + "/fit_residuals.fits";
    int figures = 0;
    for (auto f : {rungcal::FigureFormat::kPdf, rungcal::FigureFormat::kPng, rungcal::FigureFormat::kSvg}) {
      std::string e(rungcal::kFigureFormatNames.name(f));
      if (std::filesystem::exists(residuals)) {
        rungcal::SourceTable res = rungcal::read_fits_table(residuals, {"RESIDUALS", 0});
        for (const auto& rel : last.relation_names()) {
          rungcal::pl_diagram(last, rel, res.table, f, out_dir + "/pl_" + rel + "." + e);
          rungcal::residual_trends(last, rel, res.table, f, out_dir + "/residuals_" + rel + "." + e);
          figures += 2;
        }
      }
      if (versions.size() > 1)
        for (const auto& rel : last.relation_names()) {
          rungcal::version_trend(versions, rel, f, out_dir + "/versions_" + rel + "." + e);
          ++figures;
        }
    }
    if (!lightcurves.empty()) {
      rungcal::LightCurveTables lc = rungcal::read_lightcurve_tables(lightcurves);
      if (lc_stars.empty())
        for (std::size_t i = 0; i < lc.periodogram.rows(); ++i)
          if (lc_stars.empty() || lc_stars.back() != lc.periodogram.column("id").text[i]) lc_stars.push_back(lc.periodogram.column("id").text[i]);
      for (auto f : {rungcal::FigureFormat::kPdf, rungcal::FigureFormat::kPng, rungcal::FigureFormat::kSvg})
        for (const auto& star : lc_stars) {
          rungcal::light_curve_figure(lc, star, f, out_dir + "/lightcurve_" + star + "." + std::string(rungcal::kFigureFormatNames.name(f)));
          ++figures;
        }
    }
    std::printf("tables and %d figures for %zu calibration version(s) in %s\n", figures, versions.size(), out_dir.c_str());
    return rungcal::ExitCode::kSuccess;
  });
}
