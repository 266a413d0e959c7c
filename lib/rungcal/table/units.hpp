// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>

namespace rungcal {

// Kinds of quantity whose input unit rungcal converts to its own (the canonical unit).
enum class QuantityKind {
  kParallax,       // canonical mas; accepts mas, arcsec, uas
  kPeriod,         // canonical d; accepts d, h, and log_d (log10 of the period in days)
  kAngle,          // canonical deg; accepts deg, rad
  kMagnitude,      // canonical mag
  kDex,            // canonical dex ([Fe/H])
  kWavenumber,     // canonical 1/um (Gaia nu_eff, pseudocolour)
  kDimensionless,  // no unit (RUWE, counts, flags)
};

// The unit written in TUNIT for a kind ("mas", "d", ...; "" when dimensionless).
const char* canonical_unit(QuantityKind kind);

// A conversion from an input unit to the canonical one.
struct UnitConversion {
  double scale = 1.0;        // canonical = scale * input (unless log10_input)
  bool log10_input = false;  // input is log10(value in canonical unit)
  double apply(double x) const;
};

// Looks an input unit name up for a kind; nullopt when the unit is not one of that kind.
// Spellings accepted are listed in docs/file-formats.md ("Units").
std::optional<UnitConversion> unit_conversion(QuantityKind kind, const std::string& unit);

// A comma-separated list of the unit names a kind accepts, for error messages.
std::string accepted_units(QuantityKind kind);

}  // namespace rungcal
