// SPDX-License-Identifier: MIT
// Fuzz target: the light-curve stage's gaia_epoch layout on a file's table. The first byte
// picks the reader (even: VOTable, odd: ECSV); the rest is the file. Its table, with the
// layout's array columns asked for, is expanded as the array or the flat form, as the
// layout tells them apart, into light-curve points. A clean InputError is the expected
// answer to any bytes; anything else is a bug.
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "rungcal/core/error.hpp"
#include "rungcal/lightcurve/gaia_epoch_parts.hpp"
#include "rungcal/table/ecsv_io.hpp"
#include "rungcal/table/votable_io.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size == 0) return 0;
  const bool ecsv = (data[0] & 1) != 0;
  const std::string text(reinterpret_cast<const char*>(data) + 1, size - 1);
  const std::vector<std::string> arrays = rungcal::gaia_epoch_array_columns();
  try {
    const rungcal::SourceTable in = ecsv ? rungcal::parse_ecsv_table(text, "fuzz.ecsv", arrays)
                                         : rungcal::parse_votable_table(text, "fuzz.vot", arrays);
    if (!in.table.has(rungcal::kGaiaSourceId)) return 0;
    rungcal::SourceTable out;
    rungcal::GaiaLightCurveWriter writer(out, {"star", "time", "band", "mag", "err"});
    std::vector<rungcal::GaiaDroppedEpochs> dropped;
    const std::vector<std::string> bands = {"G", "BP", "RP"};
    if (rungcal::is_flat_gaia_epochs(in))
      rungcal::expand_gaia_flat(in, bands, writer, dropped);
    else
      rungcal::expand_gaia_arrays(in, bands, writer, dropped);
  } catch (const rungcal::InputError&) {
  }
  return 0;
}
