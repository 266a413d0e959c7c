// SPDX-License-Identifier: MIT
// rungcal-fit: period-luminosity relations from a dereddened calibrator catalog.
#include <cstdio>

#include <spdlog/spdlog.h>

#include "rungcal/core/stage_main.hpp"
#include "rungcal/plfit/fit_stage.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Fits period-luminosity relations (zero point, slopes, metallicity term, intrinsic scatter, "
      "residual parallax offset) to a dereddened catalog, with covariance and bootstrap errors."};
  rungcal::CommonOptions common;
  std::string config_path, out_path, in_path;
  int bootstrap = -1;
  app.add_option("--config", config_path, "Fit config (TOML)")->required();
  app.add_option("--out", out_path, "Fit result to write (overrides [fit] output)");
  app.add_option("--bootstrap", bootstrap,
                 "Bootstrap resamples, the joint fit's too (overrides the config)");
  app.add_option("--input", in_path, "Input catalog (overrides [fit] input)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  common.silence_stdout_if_quiet();
  rungcal::setup_logging("fit", common.verbosity(), common.log_file);
  rungcal::keep_freed_memory_for_reuse();

  return rungcal::run_stage("fit", [&] {
    rungcal::FitOptions options = rungcal::fit_options_from_file(config_path);
    if (!in_path.empty()) options.input_path = in_path;
    if (!out_path.empty()) options.output_path = out_path;
    if (bootstrap >= 0)
      options.bootstrap = bootstrap, options.joint_bootstrap = -1;  // the joint fit's too
    rungcal::FitResult result = rungcal::fit_catalog_file(options);
    std::fputs(rungcal::fit_summary(result).c_str(), stdout);
    spdlog::info("fit result: {}", options.output_path);
    return rungcal::ExitCode::kSuccess;
  });
}
