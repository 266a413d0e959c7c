// SPDX-License-Identifier: MIT
// rungcal-publish: a fit result -> the next immutable version of a named calibration.
#include <cmath>
#include <cstdio>

#include <spdlog/spdlog.h>

#include "rungcal/calibration/store.hpp"
#include "rungcal/core/stage_main.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Publishes a rungcal-fit result as the next version of a calibration in a store, "
      "unless its content equals the latest version's. Versions never change once written."};
  rungcal::CommonOptions common;
  rungcal::PublishOptions o;
  app.add_option("--store", o.store, "Calibration store folder")->required();
  app.add_option("--name", o.name, "Calibration name")->required();
  int set_latest = 0;
  auto* fit = app.add_option("--fit", o.fit_path, "rungcal-fit result (JSON)");
  auto* roll =
      app.add_option("--set-latest", set_latest,
                     "Point 'latest' at version N and publish nothing: the versions above it "
                     "are withdrawn (docs/operations.md, rolling back)")
          ->check(CLI::PositiveNumber);
  fit->excludes(roll);
  roll->excludes(fit);
  app.add_flag("--republish-withdrawn", o.republish_withdrawn,
               "Publish a result even when its content is a withdrawn version's");
  app.add_option("--residuals", o.residuals_path, "Its residuals (FITS), kept with the version");
  app.add_option("--config", o.config_path, "The fit config, kept with the version");
  app.add_option("--lock-wait", o.lock_wait_seconds,
                 "Seconds to wait for another publisher (then exit 5)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  common.silence_stdout_if_quiet();
  rungcal::setup_logging("publish", common.verbosity(), common.log_file);

  return rungcal::run_stage("publish", [&] {
    if (set_latest > 0) {
      rungcal::set_latest_version(o.store, o.name, set_latest, o.lock_wait_seconds);
      std::printf("%s@latest is now version %d\n", o.name.c_str(), set_latest);
      return rungcal::ExitCode::kSuccess;
    }
    if (o.fit_path.empty())
      throw rungcal::InputError({}, "command_line",
                                "--fit (a rungcal-fit result) or --set-latest is required");
    rungcal::PublishOutcome out;
    try {
      out = rungcal::publish_calibration(o);
    } catch (const rungcal::BusyError& e) {
      spdlog::error("{}", e.what());
      return rungcal::ExitCode::kBusy;
    }
    if (!out.created && out.withdrawn_match > 0) {
      std::printf(
          "%s@%d stands: the content is withdrawn version %d's, not published again "
          "(--republish-withdrawn publishes it)\n",
          o.name.c_str(), out.version, out.withdrawn_match);
      return rungcal::ExitCode::kSuccess;
    }
    if (!out.created) {
      std::printf("%s@%d unchanged: the content equals the latest version\n", o.name.c_str(),
                  out.version);
      return rungcal::ExitCode::kSuccess;
    }
    std::printf("published %s@%d in %s\n", o.name.c_str(), out.version, out.folder.c_str());
    for (const auto& [relation, params] : out.shifts.items())
      for (const auto& [name, entry] : params.items())
        if (const rungcal::ParameterShiftRecord s = rungcal::parameter_shift_from_json(entry);
            std::isfinite(s.shift_in_sigma))
          std::printf("  %s %s: %+.5f (%+.2f sigma)\n", relation.c_str(), name.c_str(), s.shift,
                      s.shift_in_sigma);
    return rungcal::ExitCode::kSuccess;
  });
}
