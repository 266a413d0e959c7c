// SPDX-License-Identifier: MIT
// The light-curve product's schema (table/lightcurve_schema.hpp): the per-band column names
// and the bands a SUMMARY holds. The names are the format's own, docs/file-formats.md
// "Light-curve summary".
#include <gtest/gtest.h>

#include "rungcal/table/lightcurve_schema.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {
namespace {

TEST(LightCurveSchema, BandColumnsAreThePrefixAndTheBand) {
  EXPECT_EQ(band_column(lightcurve_col::kMag, "V"), "mag_V");
  EXPECT_EQ(band_column(lightcurve_col::kMagErr, "Ks"), "mag_err_Ks");
  EXPECT_EQ(band_column(lightcurve_col::kPhi21Err, "I"), "phi21_err_I");
}

TEST(LightCurveSchema, SummaryBandsAreThoseWithAMeanError) {
  StarTable t;
  for (const char* c :
       {"id", "mag_V", "mag_err_V", "mag_magavg_V", "mag_I", "mag_err_I", "amplitude_I"})
    t.add_column(c, ColumnType::kReal);
  EXPECT_EQ(lightcurve_summary_bands(t), (std::vector<std::string>{"V", "I"}));
}

}  // namespace
}  // namespace rungcal
