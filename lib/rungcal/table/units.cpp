// SPDX-License-Identifier: MIT
#include "rungcal/table/units.hpp"

#include <cmath>
#include <numbers>
#include <string_view>
#include <vector>

namespace rungcal {
namespace {

struct UnitEntry {
  QuantityKind kind;
  std::string_view name;
  UnitConversion conversion;
};

const std::vector<UnitEntry>& unit_entries() {
  static const std::vector<UnitEntry> kEntries = {
      {QuantityKind::kParallax, "mas", {1.0, false}},
      {QuantityKind::kParallax, "milliarcsec", {1.0, false}},
      {QuantityKind::kParallax, "arcsec", {1000.0, false}},
      {QuantityKind::kParallax, "uas", {1e-3, false}},
      {QuantityKind::kParallax, "µas", {1e-3, false}},
      {QuantityKind::kParallax, "microarcsec", {1e-3, false}},
      // Spellings astropy writes to TUNIT for these units.
      {QuantityKind::kParallax, "10**-6 arcsec", {1e-3, false}},
      {QuantityKind::kParallax, "10**-3 arcsec", {1.0, false}},
      {QuantityKind::kPeriod, "d", {1.0, false}},
      {QuantityKind::kPeriod, "day", {1.0, false}},
      {QuantityKind::kPeriod, "days", {1.0, false}},
      {QuantityKind::kPeriod, "h", {1.0 / 24.0, false}},
      {QuantityKind::kPeriod, "log_d", {1.0, true}},
      {QuantityKind::kAngle, "deg", {1.0, false}},
      {QuantityKind::kAngle, "rad", {180.0 / std::numbers::pi, false}},
      {QuantityKind::kMagnitude, "mag", {1.0, false}},
      {QuantityKind::kMagnitude, "", {1.0, false}},
      {QuantityKind::kDex, "dex", {1.0, false}},
      {QuantityKind::kDex, "", {1.0, false}},
      {QuantityKind::kWavenumber, "1/um", {1.0, false}},
      {QuantityKind::kWavenumber, "um-1", {1.0, false}},
      {QuantityKind::kWavenumber, "1 / um", {1.0, false}},  // as astropy writes it (ECSV)
      {QuantityKind::kWavenumber, "um**-1", {1.0, false}},  // as the Gaia archive writes it
      {QuantityKind::kWavenumber, "", {1.0, false}},
      {QuantityKind::kDimensionless, "", {1.0, false}},
  };
  return kEntries;
}

}  // namespace

const char* canonical_unit(QuantityKind kind) {
  switch (kind) {
    case QuantityKind::kParallax:
      return "mas";
    case QuantityKind::kPeriod:
      return "d";
    case QuantityKind::kAngle:
      return "deg";
    case QuantityKind::kMagnitude:
      return "mag";
    case QuantityKind::kDex:
      return "";  // [Fe/H] is in dex, which FITS has no unit for
    case QuantityKind::kWavenumber:
      return "um-1";
    case QuantityKind::kDimensionless:
      return "";
  }
  return "";
}

double UnitConversion::apply(double x) const { return log10_input ? std::pow(10.0, x) : scale * x; }

std::optional<UnitConversion> unit_conversion(QuantityKind kind, const std::string& unit) {
  for (const auto& e : unit_entries())
    if (e.kind == kind && e.name == unit) return e.conversion;
  return std::nullopt;
}

std::string accepted_units(QuantityKind kind) {
  std::string out;
  for (const auto& e : unit_entries()) {
    if (e.kind != kind) continue;
    if (!out.empty()) out += ", ";
    out += e.name.empty() ? "\"\" (none)" : std::string(e.name);
  }
  return out;
}

}  // namespace rungcal
