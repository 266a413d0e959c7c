// SPDX-License-Identifier: MIT
// The array ("RAW") form of Gaia DR3 epoch photometry: one row per source, each band's
// epochs in array columns (Gaia DR3 documentation, section 20.7.1 "epoch_photometry").
#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/lightcurve/gaia_epoch_parts.hpp"

namespace rungcal {

namespace {

// Per-transit flags some services add beside the per-band ones, under the names of the flat
// form's columns (Gaia DR3 documentation section 20.7.1); applied to every band.
constexpr const char* kSharedFlags[] = {"rejected_by_variability", "rejected_by_photometry"};

// The file's array column, nullptr when absent; a scalar column of that name stops with
// "not_an_array".
const ArrayColumn* array_of(const SourceTable& in, const char* name) {
  if (!name) return nullptr;
  if (auto it = in.arrays.find(name); it != in.arrays.end()) return &it->second;
  if (in.table.has(name))
    throw InputError({in.file, {}, name}, "not_an_array",
                     "layout \"gaia_epoch\" needs an array of epochs here; the file has one "
                     "value per row (the flat form, one epoch per row, has the columns "
                     "source_id, band, time and no arrays)");
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

// Epoch k of row r of one band, as the arrays give it.
GaiaEpochReading epoch_of(const BandArrays& a, std::size_t r, std::size_t k) {
  GaiaEpochReading e;
  e.time = a.time->rows[r][k];
  if (a.mag) e.mag = a.mag->rows[r][k];
  if (a.flux) e.flux = a.flux->rows[r][k];
  if (a.snr) e.flux_over_error = a.snr->rows[r][k];
  if (a.flux_error) e.flux_error = a.flux_error->rows[r][k];
  for (const auto& flag : a.flags) e.flagged = e.flagged || flag.second->rows[r][k] == 1.0;
  return e;
}

}  // namespace

std::vector<std::string> gaia_epoch_array_columns() {
  std::vector<std::string> names;
  for (const auto& b : kGaiaEpochBands)
    for (const char* n : {b.time, b.mag, b.flux, b.flux_over_error, b.flux_error,
                          b.variability_reject, b.photometry_reject})
      if (n) names.emplace_back(n);
  for (const char* n : kSharedFlags) names.emplace_back(n);
  return names;
}

void expand_gaia_arrays(const SourceTable& in, const std::vector<std::string>& bands,
                        GaiaLightCurveWriter& writer, std::vector<GaiaDroppedEpochs>& dropped) {
  const Column& id = in.table.column(kGaiaSourceId);
  std::vector<BandArrays> arrays;
  for (const std::string& b : bands) arrays.push_back(band_arrays(in, *gaia_band_named(b)));
  for (std::size_t r = 0; r < in.table.rows(); ++r) {
    const std::string star = gaia_source_id(id, r);
    if (star.empty())
      throw InputError({in.file, in.source_rows[r], kGaiaSourceId, in.row_label},
                       "missing_required", "the row has no source_id");
    for (const BandArrays& a : arrays) {
      check_lengths(in, r, a);
      GaiaDroppedEpochs d{star, a.band->band, in.source_rows[r], 0, 0};
      for (std::size_t k = 0; k < a.time->rows[r].size(); ++k)
        writer.add(*a.band, star, epoch_of(a, r, k), in.source_rows[r], d);
      log_dropped_epochs(d);
      dropped.push_back(std::move(d));
    }
  }
}

}  // namespace rungcal
