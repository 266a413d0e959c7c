// SPDX-License-Identifier: MIT
// rungcal-apply: a published calibration + distant Cepheids -> distances per star and host.
#include <cstdio>

#include <spdlog/spdlog.h>

#include "rungcal/calibration/apply_products.hpp"
#include "rungcal/core/stage_main.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Applies a published calibration to target Cepheids (a dereddened catalog): distance "
      "modulus and distance per star, and per host a weighted mean with its statistical, "
      "calibration and systematic errors kept apart, and the hosts' covariance."};
  rungcal::CommonOptions common;
  rungcal::ApplyOptions o;
  app.add_option("--store", o.store, "Calibration store folder")->required();
  app.add_option("--calibration", o.calibration, "name@latest or name@N")->required();
  app.add_option("--relation", o.relation, "Relation to use, e.g. W_VI")->required();
  app.add_option("--targets", o.targets_path, "Dereddened target catalog (FITS, HDU CATALOG)")
      ->required();
  app.add_option(
      "--grid", o.grid_path,
      "A systematics grid's grid.json (rungcal-grid): its budget gives the systematic error");
  app.add_option("--grid-skip-category", o.grid_skip_categories,
                 "A category of the grid's budget to leave out (repeatable)");
  app.add_option("--out", o.output_path,
                 "Distances (FITS, HDUs STARS, HOSTS and HOST_COVARIANCE; CSVs beside it)");
  app.add_option("--outlier-sigma", o.outlier_sigma,
                 "Flag stars this many sigma from their host's mean");
  app.add_option("--outlier-iterations", o.outlier_iterations, "At most this many flagging passes");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  common.silence_stdout_if_quiet();
  rungcal::setup_logging("apply", common.verbosity(), common.log_file);

  return rungcal::run_stage("apply", [&] {
    rungcal::ApplyResult r = rungcal::apply_calibration_files(o);
    std::printf("calibration %s, relation %s\n", r.calibration_label.c_str(), o.relation.c_str());
    for (const auto& h : r.hosts)
      std::printf(
          "  %s: mu = %.3f +- %.3f (stat%s) +- %.3f (calibration) +- %.3f (systematic), "
          "d = %.2f +- %.2f Mpc, %d stars, %d outliers\n",
          h.host.empty() ? "(no host)" : h.host.c_str(), h.mu, h.stat_error,
          h.error_scale > 1 ? ", scaled by sqrt(chi2/dof)" : "", h.calibration_error,
          h.systematic_error, h.distance_mpc, h.distance_err_mpc, h.n_stars - h.n_outliers,
          h.n_outliers);
    spdlog::info("distances: {}", o.output_path);
    return rungcal::ExitCode::kSuccess;
  });
}
