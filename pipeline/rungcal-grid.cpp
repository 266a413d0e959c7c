// SPDX-License-Identifier: MIT
// rungcal-grid: the fit redone under each listed analysis choice, and the error budget.
#include <cstdio>

#include <spdlog/spdlog.h>

#include "rungcal/core/stage_main.hpp"
#include "rungcal/grid/grid.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Refits the calibration under each variant of the baseline analysis (extinction law, R_V, "
      "zero-point recipe, quality cuts, loss, fit space, period range, metallicity term), in "
      "parallel, and "
      "writes each parameter's shift from the baseline and the quadrature sum per category."};
  rungcal::CommonOptions common;
  std::string config_path, out_dir, catalog;
  app.add_option("--config", config_path, "Grid config (TOML)")->required();
  app.add_option("--catalog", catalog, "Ingested catalog (overrides [grid] catalog)");
  app.add_option("--out", out_dir, "Output folder (overrides [grid] output)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  common.silence_stdout_if_quiet();
  rungcal::setup_logging("grid", common.verbosity(), common.log_file);
  rungcal::keep_freed_memory_for_reuse();

  return rungcal::run_stage("grid", [&] {
    rungcal::GridOptions options = rungcal::grid_options_from_file(config_path);
    if (!catalog.empty()) options.catalog_path = catalog;
    if (!out_dir.empty()) options.output_folder = out_dir;
    rungcal::GridResult result = rungcal::run_grid_files(options);
    for (const auto& rel : result.budget.at("relations"))
      for (const auto& p : rel.at("parameters"))
        std::printf("%-6s %-22s baseline %+.4f  systematic %.4f\n",
                    rel.at("name").get<std::string>().c_str(),
                    p.at("name").get<std::string>().c_str(), p.at("baseline").get<double>(),
                    p.at("total").get<double>());
    spdlog::info("error budget: {}/grid.json", options.output_folder);
    return rungcal::ExitCode::kSuccess;
  });
}
