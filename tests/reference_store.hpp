// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/calibration/store.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "test_util.hpp"

namespace rungcal::test {

// A store dir/store holding one version of calibration `name` per scatter given: the
// Riess et al. 2018 reference fit (config/reference) with that adopted intrinsic scatter,
// each published with its residuals. The catalog is dir/<folder>/catalog.fits.
inline void publish_reference_versions(const TempDir& dir, const std::string& name,
                                       const std::vector<double>& scatters,
                                       const std::string& folder = "run") {
  IngestOptions io =
      ingest_options_from_file(source_file("config/reference/mw_cepheids_hst_gaiadr2.toml"));
  io.catalog_path = dir.file(folder + "/catalog.fits");
  write_ingest_products(run_ingest(io), io);
  for (double scatter : scatters) {
    FitOptions fo = fit_options_from_file(source_file("config/reference/fit_mw_cepheids_dr2.toml"));
    fo.input_path = io.catalog_path;
    fo.output_path = dir.file(folder + "/fit.json");
    fo.residuals_path = dir.file(folder + "/fit_residuals.fits");
    fo.scatter.value = scatter;
    fit_catalog_file(fo);
    PublishOptions po;
    po.store = dir.file("store");
    po.name = name;
    po.fit_path = fo.output_path;
    po.residuals_path = fo.residuals_path;
    publish_calibration(po);
  }
}

}  // namespace rungcal::test
