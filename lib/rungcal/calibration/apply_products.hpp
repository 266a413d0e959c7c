// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/calibration/apply.hpp"
#include "rungcal/core/stage_files.hpp"

namespace rungcal {

// Every file an apply run writes, named from its options.
struct ApplyProductPaths {
  std::string fits;            // HDUs STARS, HOSTS, HOST_COVARIANCE (options.output_path)
  std::string stars_csv;       // options.csv_path, or <output stem>.csv beside the output
  std::string hosts_csv;       // <stars_csv stem>_hosts.csv
  std::string covariance_csv;  // <stars_csv stem>_host_covariance.csv

  std::vector<std::string> all() const { return {fits, stars_csv, hosts_csv, covariance_csv}; }
};
ApplyProductPaths apply_product_paths(const ApplyOptions& options);

// What apply reads: the calibration version its reference names (when the store has it),
// the targets and the grid's budget (when given); what it writes: apply_product_paths.
StageFiles declared_files(const ApplyOptions& options);

// Loads the calibration (and the grid's budget when options.grid_path is set), applies it,
// and writes every product, each atomically (temporary file, then rename), only after every
// input has been read and checked: bad input writes nothing.
ApplyResult apply_calibration_files(const ApplyOptions& options);

}  // namespace rungcal
