// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/gaia_epoch.hpp"

#include <cmath>
#include <filesystem>
#include <limits>
#include <optional>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/lightcurve/gaia_epoch_parts.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {

const GaiaEpochBand kGaiaEpochBands[3] = {
    {"G", "g_transit_time", "g_transit_mag", "g_transit_flux", "g_transit_flux_over_error",
     "g_transit_flux_error", "variability_flag_g_reject", nullptr, kGaiaZeroPointG},
    {"BP", "bp_obs_time", "bp_mag", "bp_flux", "bp_flux_over_error", "bp_flux_error",
     "variability_flag_bp_reject", "photometry_flag_bp_reject", kGaiaZeroPointBp},
    {"RP", "rp_obs_time", "rp_mag", "rp_flux", "rp_flux_over_error", "rp_flux_error",
     "variability_flag_rp_reject", "photometry_flag_rp_reject", kGaiaZeroPointRp},
};

namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

}  // namespace

const GaiaEpochBand* gaia_band_named(const std::string& name) {
  for (const auto& b : kGaiaEpochBands)
    if (name == b.band) return &b;
  return nullptr;
}

std::string gaia_source_id(const Column& id, std::size_t r) {
  if (id.type == ColumnType::kText || id.type == ColumnType::kInteger) return id.to_string(r);
  const std::optional<double> v = cell_number(id, r);  // a float source_id would lose digits
  return v ? fmt::format("{:.0f}", *v) : "";
}

GaiaLightCurveWriter::GaiaLightCurveWriter(SourceTable& out, const LightCurveColumns& cols)
    : out_(out),
      star_(out.table.add_column(cols.star, ColumnType::kText)),
      band_(out.table.add_column(cols.band, ColumnType::kText)),
      time_(out.table.add_column(cols.time, ColumnType::kReal, "d")),
      mag_(out.table.add_column(cols.mag, ColumnType::kReal, "mag")),
      err_(out.table.add_column(cols.err, ColumnType::kReal, "mag")) {}

void GaiaLightCurveWriter::add(const GaiaEpochBand& band, const std::string& star,
                               const GaiaEpochReading& e, std::int64_t source_row,
                               GaiaDroppedEpochs& dropped) {
  if (e.flagged) {
    ++dropped.flagged;
    return;
  }
  const double mag = e.mag ? *e.mag : magnitude_from_flux(e.flux, band.zero_point);
  const double snr = e.flux_over_error ? *e.flux_over_error : e.flux / e.flux_error;
  const double err = magnitude_error_from_flux_over_error(snr);
  if (!std::isfinite(e.time) || !std::isfinite(mag) || !std::isfinite(err)) {
    ++dropped.missing;
    return;
  }
  star_.push_text(star);
  band_.push_text(band.band);
  time_.push_real(bjd_from_gaia_time(e.time));
  mag_.push_real(mag);
  err_.push_real(err);
  out_.source_rows.push_back(source_row);
}

void log_dropped_epochs(const GaiaDroppedEpochs& d) {
  if (d.flagged + d.missing > 0)
    spdlog::debug("Gaia DR3 {} {}: {} epochs dropped ({} flagged, {} with a missing value)", d.star,
                  d.band, d.flagged + d.missing, d.flagged, d.missing);
}

std::vector<std::string> gaia_epoch_files(const std::string& path) {
  // A file named literally is read as it is, even when its name holds glob characters.
  if (std::filesystem::is_regular_file(path)) return {path};
  return per_star_file_list(path);
}

double bjd_from_gaia_time(double gaia_time_d) { return gaia_time_d + kGaiaTimeOriginBjd; }

double magnitude_from_flux(double flux, double zero_point) {
  return flux > 0 ? zero_point - 2.5 * std::log10(flux) : kNaN;
}

double magnitude_error_from_flux_over_error(double flux_over_error) {
  return flux_over_error > 0 ? 2.5 / std::log(10.0) / flux_over_error : kNaN;
}

SourceTable read_gaia_epochs(const TableSourceSpec& spec, const std::vector<std::string>& bands,
                             const LightCurveColumns& cols, std::vector<InputRecord>& inputs,
                             std::vector<GaiaDroppedEpochs>& dropped) {
  SourceTable out;
  out.file = spec.path;
  GaiaLightCurveWriter writer(out, cols);
  TableSourceSpec one = spec;
  one.array_columns = gaia_epoch_array_columns();
  for (const std::string& path : gaia_epoch_files(spec.path)) {
    one.path = path;
    const SourceTable in = read_table_source(one);
    inputs.push_back({path, sha256_file(path), static_cast<std::int64_t>(in.table.rows())});
    out.row_label = in.row_label;
    if (!in.table.has(kGaiaSourceId))
      throw InputError({path, {}, kGaiaSourceId}, "missing_column",
                       "the Gaia epoch photometry has no source_id column");
    if (is_flat_gaia_epochs(in))
      expand_gaia_flat(in, bands, writer, dropped);
    else
      expand_gaia_arrays(in, bands, writer, dropped);
  }
  std::int64_t flagged = 0, missing = 0;
  for (const auto& d : dropped) flagged += d.flagged, missing += d.missing;
  spdlog::info(
      "Gaia epoch photometry: {} epochs kept, {} dropped by rejection flags, {} with a "
      "missing value (per source and band: SUMMARY "
      "flagged_<band>, missing_<band>)",
      out.table.rows(), flagged, missing);
  return out;
}

}  // namespace rungcal
