// SPDX-License-Identifier: MIT
#include "rungcal/table/lightcurve_schema.hpp"

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {

std::string band_column(std::string_view prefix, std::string_view band) {
  return fmt::format("{}_{}", prefix, band);
}

std::vector<std::string> lightcurve_summary_bands(const StarTable& summary) {
  const std::string prefix = band_column(lightcurve_col::kMagErr, "");
  std::vector<std::string> bands;
  for (const auto& name : summary.column_names())
    if (name.rfind(prefix, 0) == 0) bands.push_back(name.substr(prefix.size()));
  return bands;
}

SourceTable read_lightcurve_summary(const std::string& path) {
  SourceTable lc = read_fits_table(path, {lightcurve_hdu::kSummary, 0});
  for (const char* c : {lightcurve_col::kId, lightcurve_col::kPeriodD, lightcurve_col::kUsable})
    if (!lc.table.has(c))
      throw InputError(
          {path, {}, c}, "missing_column",
          fmt::format("not a rungcal-lightcurve summary (HDU {})", lightcurve_hdu::kSummary));
  return lc;
}

}  // namespace rungcal
