// SPDX-License-Identifier: MIT
// rungcal-lightcurve: periods, intensity-mean magnitudes and Fourier parameters from time
// series, in a summary that rungcal-ingest joins onto a calibrator catalog by star id.
#include <spdlog/spdlog.h>

#include "rungcal/core/stage_main.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Finds each star's period in its time series (multi-band Lomb-Scargle, refined by a joint "
      "Fourier fit) and measures intensity-mean magnitudes, amplitudes and Fourier parameters."};
  rungcal::CommonOptions common;
  std::string config_path, in_path, out_path;
  int threads = -1;
  app.add_option("--config", config_path, "Light-curve config (TOML)")->required();
  app.add_option("--input", in_path, "Time series to read (overrides [source] path)");
  app.add_option("--out", out_path, "Summary FITS to write (overrides [output] path)");
  app.add_option("--threads", threads, "Worker threads (0 = every core; overrides the config)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("lightcurve", common.verbosity(), common.log_file);

  return rungcal::run_stage("lightcurve", [&] {
    rungcal::LightCurveOptions options = rungcal::lightcurve_options_from_file(config_path);
    if (!in_path.empty()) options.source.path = in_path;
    if (!out_path.empty()) options.output_path = out_path;
    if (threads >= 0) options.threads = threads;
    rungcal::LightCurveResult result = rungcal::run_lightcurves(options);
    rungcal::write_lightcurve_products(result, options);
    std::size_t usable = 0;
    for (const auto& s : result.stars) usable += s.usable ? 1 : 0;
    spdlog::info("{} rows read, {} refused; {} stars, {} with a usable period", result.rows_read,
                 result.rejected.size(), result.stars.size(), usable);
    for (const auto& s : result.stars)
      if (!s.usable)
        spdlog::warn("{}: no usable period ({})", s.id, rungcal::period_flag_names(s.flags));
    spdlog::info("summary: {}", options.output_path);
    return rungcal::ExitCode::kSuccess;
  });
}
