// SPDX-License-Identifier: MIT
// Shared inside the lightcurve module by the two forms of Gaia DR3 epoch photometry:
// gaia_epoch.cpp reads the files and turns epochs into light-curve points,
// gaia_epoch_arrays.cpp expands the array ("RAW") form, gaia_epoch_flat.cpp the flat
// ("INDIVIDUAL") form. Not installed.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "rungcal/lightcurve/gaia_epoch.hpp"

namespace rungcal {

// One epoch of one band as the file gives it, before any conversion. Which of mag and
// flux_over_error is set follows the file's columns, not the epoch: a file with magnitudes
// uses them for every epoch.
struct GaiaEpochReading {
  double time = 0;                        // Gaia time, days
  std::optional<double> mag;              // when the file has magnitudes
  double flux = 0;                        // e-/s: the magnitude when mag is unset
  std::optional<double> flux_over_error;  // when the file has it, else flux / flux_error
  double flux_error = 0;                  // e-/s
  bool flagged = false;                   // a rejection flag of this epoch is set
};

// The long table both forms write, and the dropped epochs they count: one place for the
// time conversion, the zero points, the errors and the dropping rules, so that the forms
// cannot drift apart.
class GaiaLightCurveWriter {
 public:
  GaiaLightCurveWriter(SourceTable& out, const LightCurveColumns& columns);
  // Appends the epoch to star's light curve in band (BJD TCB, magnitude, error), or counts
  // it in dropped: flagged first, else missing when the time, magnitude or error is not
  // finite (a null, NaN, or a flux or flux_over_error that is not positive).
  void add(const GaiaEpochBand& band, const std::string& star, const GaiaEpochReading& epoch,
           std::int64_t source_row, GaiaDroppedEpochs& dropped);

 private:
  SourceTable& out_;
  Column &star_, &band_, &time_, &mag_, &err_;
};

// Logs one source's dropped epochs in one band (at debug level, when there are any).
void log_dropped_epochs(const GaiaDroppedEpochs& dropped);

// Gaia DR3 source_id of a row as text; "" when null. A float column is printed without
// a fraction (the digits it kept).
std::string gaia_source_id(const Column& id, std::size_t row);

// The band of kGaiaEpochBands with that name ("G", "BP", "RP"), nullptr for another.
const GaiaEpochBand* gaia_band_named(const std::string& name);

inline constexpr const char* kGaiaSourceId = "source_id";

// True when the file is the flat form: no array column and a scalar time or band column
// (both are then required; gaia_epoch_flat.cpp names the one missing).
bool is_flat_gaia_epochs(const SourceTable& in);

// Expand one file's sources into writer, one GaiaDroppedEpochs per source and band asked
// for (in file order of the sources, then in the order of bands). in has a source_id column.
void expand_gaia_arrays(const SourceTable& in, const std::vector<std::string>& bands,
                        GaiaLightCurveWriter& writer, std::vector<GaiaDroppedEpochs>& dropped);
void expand_gaia_flat(const SourceTable& in, const std::vector<std::string>& bands,
                      GaiaLightCurveWriter& writer, std::vector<GaiaDroppedEpochs>& dropped);

}  // namespace rungcal
