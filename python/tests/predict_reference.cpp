// SPDX-License-Identifier: MIT
// The C++ reader's numbers for the Python tests: loads STORE NAME@N with load_calibration and
// reads lines "log_period feh m0 m0_err" (feh "nan": none) from stdin; prints per line
// "abs_mag calibration_error mu stat_error calibration_error" to 17 digits, the first two
// from predict_absolute_magnitude, the last three from rungcal-apply's apply_calibration.
// Usage: rungcal_predict_reference STORE NAME@N RELATION < lines
#include <cmath>
#include <cstdio>
#include <iostream>
#include <optional>
#include <string>

#include "rungcal/calibration/apply.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/table/catalog_schema.hpp"

int main(int argc, char** argv) {
  if (argc != 4) return 2;
  const rungcal::Calibration cal = rungcal::load_calibration(argv[1], argv[2]);
  const std::string relation = argv[3];
  double log_period = 0, feh = 0, m0 = 0, m0_err = 0;
  std::string feh_text;
  while (std::cin >> log_period >> feh_text >> m0 >> m0_err) {
    feh = std::stod(feh_text);
    const std::optional<double> f = std::isnan(feh) ? std::nullopt : std::optional<double>(feh);
    const rungcal::Prediction p = rungcal::predict_absolute_magnitude(cal, relation, log_period, f);
    rungcal::StarTable t;  // one target: every column added before its row
    for (const std::string& c : {std::string(rungcal::col::kLogPeriod), "mag0_" + relation,
                                 "mag0_err_" + relation, std::string(rungcal::col::kFeh)})
      t.add_column(c, rungcal::ColumnType::kReal);
    t.add_column(rungcal::col::kId, rungcal::ColumnType::kText).push_text("target");
    t.column(rungcal::col::kLogPeriod).push_real(log_period);
    t.column("mag0_" + relation).push_real(m0);
    t.column("mag0_err_" + relation).push_real(m0_err);
    t.column(rungcal::col::kFeh).push_real(feh);
    const rungcal::TargetDistance s = rungcal::apply_calibration(cal, relation, t, {}).stars.at(0);
    std::printf("%.17g %.17g %.17g %.17g %.17g\n", p.abs_mag, p.calibration_error, s.mu,
                s.stat_error, s.calibration_error);
  }
  return 0;
}
