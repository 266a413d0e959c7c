// SPDX-License-Identifier: MIT
// The calibration file's schema (table/calibration_schema.hpp): what its record writes, what
// it reads back, and what an old or broken file is told. The keys and their meaning are the
// format's own, docs/file-formats.md "Calibration file"; the numbers are invented.
#include <gtest/gtest.h>

#include <cmath>

#include "rungcal/core/error.hpp"
#include "rungcal/table/calibration_schema.hpp"

namespace rungcal {
namespace {

TEST(CalibrationSchema, ShiftWithoutErrorsIsWrittenNull) {
  ParameterShiftRecord s;
  s.shift = 0.012;
  const nlohmann::json j = to_json(s);
  EXPECT_EQ(j, (nlohmann::json{
                   {"shift", 0.012}, {"combined_sigma", nullptr}, {"shift_in_sigma", nullptr}}));
  EXPECT_TRUE(std::isnan(parameter_shift_from_json(j).shift_in_sigma));
}

TEST(CalibrationSchema, DocumentReadsBackWhatItWrote) {
  CalibrationRecord c{"halden",    2,         "2026-01-02T03:04:05Z",
                      "ab12",      "[fit]\n", {{"relations", nlohmann::json::array()}},
                      std::nullopt};
  nlohmann::json first = to_json(c);
  EXPECT_EQ(first.at("schema"), "rungcal-calibration");
  EXPECT_EQ(first.at("schema_version"), 1);
  EXPECT_TRUE(first.at("previous").is_null());
  EXPECT_EQ(previous_version(first), std::nullopt);
  c.previous = PreviousVersionRecord{
      1, "cd34", {{"V", {{"alpha", to_json(ParameterShiftRecord{0.02, 0.04, 0.5})}}}}};
  const nlohmann::json second = to_json(c);
  EXPECT_EQ(previous_version(second), 1);
  const CalibrationRecord back = calibration_from_json(second);
  EXPECT_EQ(back.name, "halden");
  EXPECT_EQ(back.version, 2);
  EXPECT_EQ(back.previous->content_sha256, "cd34");
  EXPECT_EQ(to_json(back), second);
  EXPECT_NO_THROW(require_calibration_schema(second, "v0002/calibration.json"));
  EXPECT_NO_THROW(check_calibration_document(second, "v0002/calibration.json"));
}

TEST(CalibrationSchema, BrokenFileNamesTheFileAndTheKey) {
  try {
    check_calibration_document(
        {{"name", "halden"}, {"version", "2"}, {"fit", nlohmann::json::object()}},
        "v0002/calibration.json");
    FAIL() << "a version that is a string passed";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "calibration_schema");
    EXPECT_EQ(e.where().file, "v0002/calibration.json");
    EXPECT_EQ(e.where().column, "version");
  }
  try {
    require_calibration_schema({{"schema", "rungcal-fit"}}, "fit.json");
    FAIL() << "a fit result passed as a calibration";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "not_a_calibration");
    EXPECT_EQ(e.where().column, "schema");
  }
}

}  // namespace
}  // namespace rungcal
