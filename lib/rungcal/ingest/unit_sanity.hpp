// SPDX-License-Identifier: MIT
#pragma once

#include <map>
#include <string>
#include <vector>

#include "rungcal/core/enum_table.hpp"

namespace rungcal {

// What ingest does when a mapped column's values, taken together, look like a unit
// mistake (parallaxes in arcsec mapped as mas, periods in days mapped as log_d, ...), and
// when a star is beyond its class's limit (ClassLimits in ingest.hpp): the same choices.
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
// - absolute magnitude: M = m + 5 log10(parallax / 100 mas) of the stars whose parallax is
//   at least 5 times its error, per class and band, before extinction (which makes M fainter
//   by up to a few magnitudes in the optical). Pulsators of a class span a few magnitudes
//   over their periods and bands: classical Cepheids from about -1.5 (V, 2 d) to -9 (a
//   Wesenheit magnitude at 100 d), type II Cepheids +1 to -5, anomalous Cepheids +1 to -3.5,
//   RR Lyrae +1.5 (u) to -1 (mid-infrared) (memory, common practice). The ranges reach
//   several magnitudes further on the faint side: no extinction is applied (A_V reaches
//   several magnitudes in the Galactic disc and bulge), and a parallax offset of 0.1 mas
//   makes the stars above 5 sigma look several magnitudes fainter. A column of something
//   else (an error read as a magnitude gives about -12) or parallaxes in another unit
//   (arcsec or uas for mas: 15 mag) fall far outside.
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
  // Median absolute magnitude range per canonical class, mag, every band
  // ([validate.class_absolute_magnitude_median_range]); classes not listed are not checked.
  std::map<std::string, std::pair<double, double>> class_absolute_magnitude_median = {
      {"classical_cepheid", {-10.5, 4.0}},
      {"type2_cepheid", {-6.5, 5.0}},
      {"anomalous_cepheid", {-5.0, 5.0}},
      {"rr_lyrae", {-3.0, 5.0}},
  };
  // "" when usable, else "field: rule".
  std::string check() const;
};

// The values a unit check looks at, in canonical units, for the rows of one sample of the
// input (rows whose value cannot be read are left out).
struct UnitSample {
  std::string file;                            // input file, for messages
  std::vector<double> parallax_mas;            // parallaxes after conversion
  std::string parallax_column, parallax_unit;  // input column and the unit it was read in
  std::map<std::string, std::vector<double>> period_d_by_class;  // periods after conversion
  std::string period_column, period_unit;
  // Absolute magnitudes by class, then by band's input column: M = m + 5 log10(parallax /
  // 100 mas) for the stars with parallax >= 5 times its error.
  std::map<std::string, std::map<std::string, std::vector<double>>> absolute_mag_by_class;
};

// A finding: the rule broken and a message naming the file, column, median and likely cause.
struct UnitFinding {
  std::string rule;    // "parallax_unit", "period_unit" or "absolute_magnitude_median"
  std::string column;  // input column
  std::string message;
};

// The implausible medians in the sample (none when it is too small: fewer than 5 values).
std::vector<UnitFinding> find_unit_mistakes(const UnitSample& sample, const UnitSanityOptions& o);

// Applies the policy: refuse throws InputError (rule of the first finding, exit 2), warn
// logs each finding, off does nothing.
void apply_unit_checks(const UnitSample& sample, const UnitSanityOptions& o);

}  // namespace rungcal
