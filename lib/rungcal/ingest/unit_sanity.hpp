// SPDX-License-Identifier: MIT
#pragma once

#include <map>
#include <string>
#include <vector>

#include "rungcal/core/enum_table.hpp"

namespace rungcal {

// What ingest does when a mapped column's values, taken together, look like a unit
// mistake (parallaxes in arcsec mapped as mas, periods in days mapped as log_d, ...).
enum class UnitCheckPolicy { kRefuse, kWarn, kOff };
inline constexpr EnumTable<UnitCheckPolicy, 3> kUnitCheckPolicyNames{{{
    {UnitCheckPolicy::kRefuse, "refuse"},
    {UnitCheckPolicy::kWarn, "warn"},
    {UnitCheckPolicy::kOff, "off"},
}}};

// Plausible medians of a whole input ([validate]): a single star may be odd, a whole
// catalog's median is not. Defaults are common practice, wide on purpose:
// - parallax: the nearest classical Cepheid, Polaris, has about 7.5 mas (memory) and the
//   nearest RR Lyrae star, RR Lyr, about 3.6 mas (memory); a calibrator sample's median is
//   far below 20 mas. Gaia's faintest parallaxes are tens of micro-arcsec, whose errors alone
//   keep a median |parallax| above 5 uas.
// - period: the bulk of each class (days): classical Cepheids 1.5-100, type II Cepheids
//   0.8-100, anomalous Cepheids 0.3-3, RR Lyrae 0.2-1.2 (memory, common practice); a
//   classical Cepheid sample with a median below 1.5 d is log-periods read as days, unless
//   it is a list of short overtone pulsators (widen the range for those).
struct UnitSanityOptions {
  UnitCheckPolicy policy = UnitCheckPolicy::kRefuse;  // [validate] unit_checks
  double parallax_median_min_mas = 0.005;  // [validate] parallax_median_range_mas = [min, max]
  double parallax_median_max_mas = 20.0;
  // Median period range per canonical pulsator class, days
  // ([validate.class_period_median_range_d]); classes not listed are not checked.
  std::map<std::string, std::pair<double, double>> class_period_median_d = {
      {"classical_cepheid", {1.5, 100.0}},
      {"type2_cepheid", {0.8, 100.0}},
      {"anomalous_cepheid", {0.3, 3.0}},
      {"rr_lyrae", {0.2, 1.2}},
  };
  // "" when usable, else "field: rule".
  std::string check() const;
};

// The values a unit check looks at, in canonical units, for the rows of one sample of the
// input (rows whose value cannot be read are left out).
struct UnitSample {
  std::string file;                 // input file, for messages
  std::vector<double> parallax_mas;  // parallaxes after conversion
  std::string parallax_column, parallax_unit;  // input column and the unit it was read in
  std::map<std::string, std::vector<double>> period_d_by_class;  // periods after conversion
  std::string period_column, period_unit;
};

// A finding: the rule broken and a message naming the file, column, median and likely cause.
struct UnitFinding {
  std::string rule;     // "parallax_unit" or "period_unit"
  std::string column;   // input column
  std::string message;
};

// The implausible medians in the sample (none when it is too small: fewer than 5 values).
std::vector<UnitFinding> find_unit_mistakes(const UnitSample& sample, const UnitSanityOptions& o);

// Applies the policy: refuse throws InputError (rule of the first finding, exit 2), warn
// logs each finding, off does nothing.
void apply_unit_checks(const UnitSample& sample, const UnitSanityOptions& o);

}  // namespace rungcal
