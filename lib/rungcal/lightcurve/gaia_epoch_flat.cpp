// SPDX-License-Identifier: MIT
// The flat ("INDIVIDUAL") form of Gaia DR3 epoch photometry: one epoch per row, its band in
// a column (Gaia DR3 documentation, section 20.7.1: "A flat table (sparse cube), with one
// photometric point per source per row, is obtained by selecting either INDIVIDUAL or
// COMBINED"; its columns as listed in table 1 of the Gaia DR3 paper on the epoch
// photometry, A&A 2023, article aa44204-22: source_id, transit_id, band, time, mag, flux,
// flux_error, flux_over_error, rejected_by_photometry, rejected_by_variability,
// other_flags, solution_id).
#include <limits>
#include <map>
#include <string_view>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/lightcurve/gaia_epoch_parts.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {

namespace {

constexpr const char* kBand = "band";
constexpr const char* kTime = "time";
constexpr const char* kMag = "mag";
constexpr const char* kFlux = "flux";
constexpr const char* kFluxError = "flux_error";
constexpr const char* kFluxOverError = "flux_over_error";
// "True/False" per epoch (table 1 above). other_flags, a bit mask of further processing
// flags, rejects nothing: the array form keeps those epochs too.
constexpr const char* kRejectFlags[] = {"rejected_by_variability", "rejected_by_photometry"};

const Column* column_of(const SourceTable& in, const char* name) {
  return in.table.has(name) ? &in.table.column(name) : nullptr;
}

const Column& required_column(const SourceTable& in, const char* name, const std::string& why) {
  if (const Column* c = column_of(in, name)) return *c;
  throw InputError({in.file, {}, name}, "missing_column",
                   fmt::format("the flat Gaia epoch photometry has no column {} ({})", name, why));
}

// The columns of one file.
struct FlatColumns {
  const Column* id = nullptr;
  const Column* band = nullptr;
  const Column* time = nullptr;
  const Column* mag = nullptr;   // or flux, with the band's zero point
  const Column* flux = nullptr;  // when mag is absent, or for the errors
  const Column* snr = nullptr;   // flux over error, or
  const Column* flux_error = nullptr;
  std::vector<const Column*> flags;
};

FlatColumns flat_columns(const SourceTable& in) {
  FlatColumns c;
  c.id = &in.table.column(kGaiaSourceId);
  c.band = &required_column(in, kBand, "each row's band: G, BP or RP");
  c.time = &required_column(in, kTime, "each epoch's Gaia time");
  c.mag = column_of(in, kMag);
  if (!c.mag) c.flux = &required_column(in, kFlux, "there is no mag column either");
  c.snr = column_of(in, kFluxOverError);
  if (!c.snr) {
    c.flux_error = &required_column(
        in, kFluxError,
        fmt::format("the magnitude errors come from {} or from it", kFluxOverError));
    if (!c.flux) c.flux = &required_column(in, kFlux, "the errors need the fluxes");
  }
  for (const char* f : kRejectFlags)
    if (const Column* col = column_of(in, f)) c.flags.push_back(col);
  return c;
}

InputLocation where(const SourceTable& in, std::size_t r, const Column& c) {
  return {in.file, in.source_rows[r], c.name, in.row_label};
}

// A cell as a number: NaN when null (counted as missing), a stop when it is no number.
double number_in(const SourceTable& in, std::size_t r, const Column& c) {
  if (c.is_null(r)) return std::numeric_limits<double>::quiet_NaN();
  if (const std::optional<double> v = cell_number(c, r)) return *v;
  throw InputError(where(in, r, c), "not_a_number",
                   fmt::format("\"{}\" is not a number", c.to_string(r)));
}

// A rejection flag: a logical column's value, or in a text file the words astropy and the
// archive write (True/False, true/false, T/F, 1/0); an empty cell sets nothing.
bool flag_in(const SourceTable& in, std::size_t r, const Column& c) {
  if (c.is_null(r)) return false;
  if (c.type == ColumnType::kBoolean) return c.boolean[r] != 0;
  if (c.type != ColumnType::kText) return c.as_real(r) != 0.0;
  const std::string_view v = c.text[r];
  if (v == "True" || v == "true" || v == "TRUE" || v == "T" || v == "t" || v == "1") return true;
  if (v == "False" || v == "false" || v == "FALSE" || v == "F" || v == "f" || v == "0")
    return false;
  throw InputError(where(in, r, c), "not_a_flag",
                   fmt::format("\"{}\" is not a flag: write True or False", c.text[r]));
}

GaiaEpochReading epoch_in(const SourceTable& in, std::size_t r, const FlatColumns& c) {
  GaiaEpochReading e;
  e.time = number_in(in, r, *c.time);
  if (c.mag) e.mag = number_in(in, r, *c.mag);
  if (c.flux) e.flux = number_in(in, r, *c.flux);
  if (c.snr) e.flux_over_error = number_in(in, r, *c.snr);
  if (c.flux_error) e.flux_error = number_in(in, r, *c.flux_error);
  for (const Column* f : c.flags) e.flagged = flag_in(in, r, *f) || e.flagged;
  return e;
}

// One source's rows, by band (indices into kGaiaEpochBands), in file order.
struct SourceRows {
  std::string star;
  std::size_t first_row = 0;
  std::vector<std::size_t> rows_by_band[3];
};

// The file's rows grouped by source (in the order sources first appear) and band.
std::vector<SourceRows> rows_by_source(const SourceTable& in, const FlatColumns& c) {
  std::vector<SourceRows> sources;
  std::map<std::string, std::size_t> index;
  for (std::size_t r = 0; r < in.table.rows(); ++r) {
    const std::string star = gaia_source_id(*c.id, r);
    if (star.empty())
      throw InputError(where(in, r, *c.id), "missing_required", "the row has no source_id");
    const std::string band = c.band->is_null(r) ? "" : c.band->to_string(r);
    const GaiaEpochBand* b = gaia_band_named(band);
    if (!b)
      throw InputError(where(in, r, *c.band), "unknown_band",
                       fmt::format("\"{}\" is not a Gaia band: G, BP or RP", band));
    auto [it, is_new] = index.try_emplace(star, sources.size());
    if (is_new) sources.push_back({star, r, {}});
    sources[it->second].rows_by_band[b - kGaiaEpochBands].push_back(r);
  }
  return sources;
}

}  // namespace

bool is_flat_gaia_epochs(const SourceTable& in) {
  return in.arrays.empty() && (in.table.has(kTime) || in.table.has(kBand));
}

void expand_gaia_flat(const SourceTable& in, const std::vector<std::string>& bands,
                      GaiaLightCurveWriter& writer, std::vector<GaiaDroppedEpochs>& dropped) {
  const FlatColumns c = flat_columns(in);
  for (const SourceRows& s : rows_by_source(in, c)) {
    for (const std::string& name : bands) {
      const GaiaEpochBand* b = gaia_band_named(name);
      GaiaDroppedEpochs d{s.star, b->band, in.source_rows[s.first_row], 0, 0};
      for (std::size_t r : s.rows_by_band[b - kGaiaEpochBands])
        writer.add(*b, s.star, epoch_in(in, r, c), in.source_rows[r], d);
      log_dropped_epochs(d);
      dropped.push_back(std::move(d));
    }
  }
}

}  // namespace rungcal
