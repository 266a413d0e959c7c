// SPDX-License-Identifier: MIT
// rungcal-simulate: a mock calibrator sample, light curves and target galaxy from a known truth.
#include <spdlog/spdlog.h>

#include "rungcal/core/stage_main.hpp"
#include "rungcal/simulate/simulate.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Draws a mock calibrator catalog, light curves and distant target Cepheids from a known "
      "truth (relations, distances, reddening, parallax zero point) and writes them with the "
      "truth."};
  rungcal::CommonOptions common;
  std::string config_path, out_folder;
  long long seed = -1;
  app.add_option("--config", config_path, "Simulation config (TOML)")->required();
  app.add_option("--out", out_folder, "Folder to write into (overrides [simulate] output_folder)");
  app.add_option("--seed", seed, "Seed (overrides the config)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("simulate", common.verbosity(), common.log_file);

  return rungcal::run_stage("simulate", [&] {
    rungcal::SimulateOptions options = rungcal::simulate_options_from_file(config_path);
    if (!out_folder.empty()) options.output_folder = out_folder;
    if (seed >= 0) options.seed = static_cast<std::uint64_t>(seed);
    rungcal::BandTable bands = rungcal::BandTable::from_file(options.bands_file);
    rungcal::Simulation sim = rungcal::simulate(options, bands);
    rungcal::write_simulation(sim, options.output_folder);
    spdlog::info("{} calibrators, {} light-curve points, {} targets written to {}",
                 sim.calibrators.rows(), sim.light_curves.rows(), sim.targets.rows(),
                 options.output_folder);
    return rungcal::ExitCode::kSuccess;
  });
}
