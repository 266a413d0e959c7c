// SPDX-License-Identifier: MIT
// rungcal-ingest: a calibrator catalog (FITS or text) -> the canonical FITS catalog.
#include <spdlog/spdlog.h>

#include "rungcal/core/stage_main.hpp"
#include "rungcal/ingest/ingest.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Reads a calibrator catalog through a TOML column map, validates every row and "
      "writes the canonical FITS catalog plus a table of rejected rows."};
  rungcal::CommonOptions common;
  std::string config_path, out_path, in_path, lightcurves_path;
  app.add_option("--config", config_path, "Ingest config (TOML)")->required();
  app.add_option("--out", out_path, "Catalog to write (overrides [output] catalog)");
  app.add_option("--input", in_path, "Input catalog (overrides [source] path)");
  app.add_option("--lightcurves", lightcurves_path,
                 "rungcal-lightcurve summary whose periods and mean magnitudes replace the "
                 "catalog's (overrides [lightcurves] summary)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("ingest", common.verbosity(), common.log_file);
  rungcal::keep_freed_memory_for_reuse();  // groups of a large catalog reuse the same buffers

  return rungcal::run_stage("ingest", [&] {
    rungcal::IngestOptions options = rungcal::ingest_options_from_file(config_path);
    if (!in_path.empty()) options.input_path = in_path;
    if (!out_path.empty()) options.catalog_path = out_path;
    if (!lightcurves_path.empty()) options.lightcurves.summary_path = lightcurves_path;
    rungcal::IngestResult result = rungcal::ingest_catalog_file(options);
    spdlog::info("{} rows read, {} stars in the catalog, {} rejected", result.rows_read,
                 result.stars, result.rejected.size());
    for (const auto& r : result.rejected)
      spdlog::debug("rejected line/row {} ({}): [{}] {}", r.source_row, r.id, r.rule, r.message);
    spdlog::info("catalog: {}", options.catalog_path);
    return rungcal::ExitCode::kSuccess;
  });
}
