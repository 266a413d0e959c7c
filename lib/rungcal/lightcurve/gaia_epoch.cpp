// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/gaia_epoch.hpp"

#include <cmath>
#include <filesystem>
#include <limits>
#include <optional>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
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
// Per-transit flags some services add beside the per-band ones (the names of the flat
// "INDIVIDUAL" form, Gaia DR3 documentation section 20.7.1); applied to every band.
constexpr const char* kSharedFlags[] = {"rejected_by_variability", "rejected_by_photometry"};
constexpr const char* kSourceId = "source_id";

const GaiaEpochBand* band_named(const std::string& name) {
  for (const auto& b : kGaiaEpochBands)
    if (name == b.band) return &b;
  return nullptr;
}

// The file's array column, nullptr when absent; a scalar column of that name stops with
// "not_an_array".
const ArrayColumn* array_of(const SourceTable& in, const char* name) {
  if (!name) return nullptr;
  if (auto it = in.arrays.find(name); it != in.arrays.end()) return &it->second;
  if (in.table.has(name))
    throw InputError({in.file, {}, name}, "not_an_array",
                     "layout \"gaia_epoch\" needs an array of epochs here; the file has one "
                     "value per row (a flat, one-epoch-per-row download is a long table: "
                     "leave layout out and name its columns in [columns])");
  return nullptr;
}

const ArrayColumn& required_array(const SourceTable& in, const char* name, const std::string& why) {
  if (const ArrayColumn* a = array_of(in, name)) return *a;
  throw InputError({in.file, {}, name}, "missing_column",
                   fmt::format("the Gaia epoch photometry has no array column {} ({})", name, why));
}

// One band's columns in one file.
struct BandArrays {
  const GaiaEpochBand* band = nullptr;
  const ArrayColumn* time = nullptr;
  const ArrayColumn* mag = nullptr;   // or flux, with zero point
  const ArrayColumn* flux = nullptr;  // when mag is absent
  const ArrayColumn* snr = nullptr;   // flux over error, or
  const ArrayColumn* flux_error = nullptr;
  std::vector<std::pair<const char*, const ArrayColumn*>> flags;
};

BandArrays band_arrays(const SourceTable& in, const GaiaEpochBand& b) {
  BandArrays a;
  a.band = &b;
  a.time = &required_array(in, b.time, fmt::format("band {} was asked for", b.band));
  a.mag = array_of(in, b.mag);
  if (!a.mag)
    a.flux = &required_array(in, b.flux, fmt::format("{} has no {} either", b.band, b.mag));
  a.snr = array_of(in, b.flux_over_error);
  if (!a.snr) {
    a.flux_error = &required_array(
        in, b.flux_error,
        fmt::format("the {} magnitude errors come from {} or from it", b.band, b.flux_over_error));
    if (!a.flux)
      a.flux = &required_array(in, b.flux, fmt::format("the {} errors need the fluxes", b.band));
  }
  for (const char* f :
       {b.variability_reject, b.photometry_reject, kSharedFlags[0], kSharedFlags[1]})
    if (const ArrayColumn* c = array_of(in, f)) a.flags.emplace_back(f, c);
  return a;
}

// Every array of a band must hold one element per epoch of its time array.
void check_lengths(const SourceTable& in, std::size_t r, const BandArrays& a) {
  const std::size_t n = a.time->rows[r].size();
  auto check = [&](const char* name, const ArrayColumn* c) {
    if (!c || c->rows[r].size() == n) return;
    throw InputError({in.file, in.source_rows[r], name, in.row_label}, "array_length",
                     fmt::format("{} has {} elements where {} has {}: each array holds one value "
                                 "per epoch",
                                 name, c->rows[r].size(), a.band->time, n));
  };
  check(a.band->mag, a.mag);
  check(a.band->flux, a.flux);
  check(a.band->flux_over_error, a.snr);
  check(a.band->flux_error, a.flux_error);
  for (const auto& [name, c] : a.flags) check(name, c);
}

std::string source_id_of(const Column& id, std::size_t r) {
  if (id.type == ColumnType::kText || id.type == ColumnType::kInteger) return id.to_string(r);
  const std::optional<double> v = cell_number(id, r);  // a float source_id would lose digits
  return v ? fmt::format("{:.0f}", *v) : "";
}

}  // namespace

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

std::vector<std::string> gaia_epoch_array_columns() {
  std::vector<std::string> names;
  for (const auto& b : kGaiaEpochBands)
    for (const char* n : {b.time, b.mag, b.flux, b.flux_over_error, b.flux_error,
                          b.variability_reject, b.photometry_reject})
      if (n) names.emplace_back(n);
  for (const char* n : kSharedFlags) names.emplace_back(n);
  return names;
}

SourceTable read_gaia_epochs(const TableSourceSpec& spec, const std::vector<std::string>& bands,
                             const LightCurveColumns& cols, std::vector<InputRecord>& inputs,
                             std::vector<GaiaDroppedEpochs>& dropped) {
  SourceTable out;
  out.file = spec.path;
  StarTable& t = out.table;
  Column& star_col = t.add_column(cols.star, ColumnType::kText);
  Column& band_col = t.add_column(cols.band, ColumnType::kText);
  Column& time_col = t.add_column(cols.time, ColumnType::kReal, "d");
  Column& mag_col = t.add_column(cols.mag, ColumnType::kReal, "mag");
  Column& err_col = t.add_column(cols.err, ColumnType::kReal, "mag");
  TableSourceSpec one = spec;
  one.array_columns = gaia_epoch_array_columns();
  for (const std::string& path : gaia_epoch_files(spec.path)) {
    one.path = path;
    const SourceTable in = read_table_source(one);
    inputs.push_back({path, sha256_file(path), static_cast<std::int64_t>(in.table.rows())});
    out.row_label = in.row_label;
    if (!in.table.has(kSourceId))
      throw InputError({path, {}, kSourceId}, "missing_column",
                       "the Gaia epoch photometry has no source_id column");
    const Column& id = in.table.column(kSourceId);
    std::vector<BandArrays> arrays;
    for (const std::string& b : bands) arrays.push_back(band_arrays(in, *band_named(b)));
    for (std::size_t r = 0; r < in.table.rows(); ++r) {
      const std::string star = source_id_of(id, r);
      if (star.empty())
        throw InputError({path, in.source_rows[r], kSourceId, in.row_label}, "missing_required",
                         "the row has no source_id");
      for (const BandArrays& a : arrays) {
        check_lengths(in, r, a);
        GaiaDroppedEpochs d{star, a.band->band, in.source_rows[r], 0, 0};
        const std::vector<double>& times = a.time->rows[r];
        for (std::size_t k = 0; k < times.size(); ++k) {
          bool flagged = false;
          for (const auto& flag : a.flags) flagged = flagged || flag.second->rows[r][k] == 1.0;
          if (flagged) {
            ++d.flagged;
            continue;
          }
          const double mag = a.mag ? a.mag->rows[r][k]
                                   : magnitude_from_flux(a.flux->rows[r][k], a.band->zero_point);
          const double snr =
              a.snr ? a.snr->rows[r][k] : a.flux->rows[r][k] / a.flux_error->rows[r][k];
          const double err = magnitude_error_from_flux_over_error(snr);
          if (!std::isfinite(times[k]) || !std::isfinite(mag) || !std::isfinite(err)) {
            ++d.missing;
            continue;
          }
          star_col.push_text(star);
          band_col.push_text(a.band->band);
          time_col.push_real(bjd_from_gaia_time(times[k]));
          mag_col.push_real(mag);
          err_col.push_real(err);
          out.source_rows.push_back(in.source_rows[r]);
        }
        if (d.flagged + d.missing > 0)
          spdlog::debug("Gaia DR3 {} {}: {} epochs dropped ({} flagged, {} with a missing value)",
                        star, d.band, d.flagged + d.missing, d.flagged, d.missing);
        dropped.push_back(std::move(d));
      }
    }
  }
  std::int64_t flagged = 0, missing = 0;
  for (const auto& d : dropped) flagged += d.flagged, missing += d.missing;
  spdlog::info(
      "Gaia epoch photometry: {} epochs kept, {} dropped by rejection flags, {} with a "
      "missing value (per source and band: SUMMARY "
      "flagged_<band>, missing_<band>)",
      t.rows(), flagged, missing);
  return out;
}

}  // namespace rungcal
