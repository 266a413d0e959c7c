// SPDX-License-Identifier: MIT
// rungcal-apply's products: per star, per host and the host-host covariance, FITS and CSV.
#include "rungcal/calibration/apply_products.hpp"

#include <filesystem>

#include <spdlog/spdlog.h>

#include "rungcal/calibration/host_covariance.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/file_names.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/row_table.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

StarTable stars_table(const ApplyResult& r) {
  using S = TargetDistance;
  return table_from_rows<S>(
      {text_column<S>("id", "", [](const S& s) { return s.id; }),
       text_column<S>("host", "", [](const S& s) { return s.host; }),
       real_column<S>("log_period_f", "", "log10 of the (fundamentalized) period in days",
                      [](const S& s) { return s.log_period; }),
       real_column<S>("m0", "mag", "dereddened or Wesenheit magnitude",
                      [](const S& s) { return s.m0; }),
       real_column<S>("abs_mag", "mag", "absolute magnitude from the calibration",
                      [](const S& s) { return s.abs_mag; }),
       real_column<S>("mu", "mag", "distance modulus", [](const S& s) { return s.mu; }),
       real_column<S>("mu_stat_err", "mag", "photometry and intrinsic scatter",
                      [](const S& s) { return s.stat_error; }),
       real_column<S>("mu_cal_err", "mag",
                      "calibration, every prior included (common to all stars)",
                      [](const S& s) { return s.calibration_error; }),
       real_column<S>("mu_sys_err", "mag",
                      "systematics grid (common to all stars; 0 without a grid)",
                      [](const S& s) { return s.systematic_error; }),
       real_column<S>("distance_pc", "pc", "", [](const S& s) { return s.distance_pc; }),
       real_column<S>("distance_mpc", "Mpc", "", [](const S& s) { return s.distance_pc / 1e6; }),
       real_column<S>("distance_err_mpc", "Mpc", "the three errors in quadrature",
                      [](const S& s) { return s.distance_err_pc / 1e6; }),
       boolean_column<S>("outlier", "left out of the host mean",
                         [](const S& s) { return s.outlier; })},
      r.stars);
}

StarTable hosts_table(const ApplyResult& r) {
  using H = HostDistance;
  return table_from_rows<H>(
      {text_column<H>("host", "", [](const H& h) { return h.host; }),
       integer_column<H>("n_stars", "", [](const H& h) { return h.n_stars; }),
       integer_column<H>("n_outliers", "", [](const H& h) { return h.n_outliers; }),
       real_column<H>("mu", "mag", "inverse-variance mean of the stars not flagged",
                      [](const H& h) { return h.mu; }),
       real_column<H>("mu_stat_err", "mag", "statistical, scaled by error_scale",
                      [](const H& h) { return h.stat_error; }),
       real_column<H>("mu_cal_err", "mag", "calibration, every prior included: shared by all hosts",
                      [](const H& h) { return h.calibration_error; }),
       real_column<H>("mu_sys_err", "mag", "systematics grid: shared by all hosts",
                      [](const H& h) { return h.systematic_error; }),
       real_column<H>("mu_err", "mag", "the three errors in quadrature",
                      [](const H& h) { return h.total_error(); }),
       real_column<H>("dispersion", "mag", "", [](const H& h) { return h.dispersion; }),
       real_column<H>("chi2", "", "of the stars used about mu", [](const H& h) { return h.chi2; }),
       integer_column<H>("dof", "stars used - 1", [](const H& h) { return h.dof; }),
       real_column<H>("chi2_dof", "", "chi2 / dof", [](const H& h) { return h.chi2_per_dof(); }),
       real_column<H>("error_scale", "", "max(1, sqrt(chi2/dof)): the statistical error's scale",
                      [](const H& h) { return h.error_scale; }),
       real_column<H>("mu_stat_err_raw", "mag", "1/sqrt(sum w), before scaling",
                      [](const H& h) { return h.stat_error_raw; }),
       real_column<H>("distance_mpc", "Mpc", "", [](const H& h) { return h.distance_mpc; }),
       real_column<H>("distance_err_mpc", "Mpc", "from mu_err",
                      [](const H& h) { return h.distance_err_mpc; })},
      r.hosts);
}

}  // namespace

ApplyProductPaths apply_product_paths(const ApplyOptions& o) {
  ApplyProductPaths p;
  p.fits = o.output_path;
  p.stars_csv = o.csv_path.empty() ? path_beside(o.output_path, ".csv") : o.csv_path;
  p.hosts_csv = path_beside(p.stars_csv, "_hosts.csv");
  p.covariance_csv = path_beside(p.stars_csv, "_host_covariance.csv");
  return p;
}

StageFiles declared_files(const ApplyOptions& o) {
  StageFiles f;
  f.add_input(calibration_file(o.store, o.calibration));
  f.add_input(o.targets_path);
  f.add_input(o.grid_path);
  f.outputs = apply_product_paths(o).all();
  return f;
}

ApplyResult apply_calibration_files(const ApplyOptions& o) {
  throw_if_invalid(o.check(), "");
  Calibration cal = load_calibration(o.store, o.calibration);
  SourceTable targets = read_fits_table(o.targets_path, {catalog_hdu::kCatalog, 0});
  SystematicShifts systematics;
  if (!o.grid_path.empty()) {
    systematics = read_systematic_shifts(o.grid_path, cal, o.relation)
                      .without_categories(o.grid_skip_categories, "grid_skip_categories");
    for (std::size_t v = 0; v < systematics.variants.size(); ++v)
      if (systematics.changes_extinction[v])
        spdlog::warn(
            "{}: variant '{}' changes the extinction law: the targets' magnitudes would move with "
            "it, "
            "which apply does not redo, so its systematic here is the calibration's shift alone "
            "(an "
            "overstatement for a Wesenheit relation); leave category '{}' out to drop it",
            o.grid_path, systematics.variants[v], systematics.categories[v]);
  }
  ApplyResult r = apply_calibration(cal, o.relation, targets.table, o, systematics);
  Provenance prov = Provenance::for_stage("apply");
  prov.inputs.push_back({o.targets_path, sha256_file(o.targets_path),
                         static_cast<std::int64_t>(targets.table.rows())});
  if (!o.grid_path.empty()) prov.inputs.push_back({o.grid_path, sha256_file(o.grid_path), -1});
  int scaled = 0;
  for (const auto& h : r.hosts) scaled += h.error_scale > 1 ? 1 : 0;
  StarTable stars = stars_table(r), hosts = hosts_table(r),
            covariance = host_covariance_table(host_covariance(r));
  for (StarTable* t : {&stars, &hosts, &covariance}) {
    stamp_provenance(*t, prov, "distances");
    t->set_keyword("RGCALIB", r.calibration_label, "calibration name@version");
    t->set_keyword(calibration_fits::kContentShaKeyword,
                   cal.document.value(calibration_key::kContentSha256, ""),
                   "calibration content SHA-256");
    t->set_keyword("RGRELAT", o.relation, "relation applied");
    t->set_keyword("RGNSYSV", static_cast<std::int64_t>(r.systematics.variants.size()),
                   "systematics grid variants in mu_sys_err (0: no grid)");
    t->set_keyword("RGNSCALE", static_cast<std::int64_t>(scaled),
                   "hosts whose stat error is scaled (chi2/dof > 1)");
  }
  const ApplyProductPaths paths = apply_product_paths(o);
  write_fits_tables(paths.fits,
                    {{"STARS", &stars}, {"HOSTS", &hosts}, {"HOST_COVARIANCE", &covariance}});
  write_csv_table(stars, paths.stars_csv);
  write_csv_table(hosts, paths.hosts_csv);
  write_csv_table(covariance, paths.covariance_csv);
  return r;
}

}  // namespace rungcal
