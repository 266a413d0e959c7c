// SPDX-License-Identifier: MIT
#pragma once

#include "rungcal/core/enum_table.hpp"

namespace rungcal {

// Interstellar extinction laws, each A_lambda / A_V as a function of wavelength and
// R_V = A_V / E(B-V). x = 1/lambda in inverse microns.
enum class ExtinctionLaw {
  // Cardelli, Clayton & Mathis 1989, ApJ 345, 245, eqs. 2-5: A/A_V = a(x) + b(x)/R_V over
  // 0.3 <= x <= 10 (1000 A to 3.33 um). Infrared a = 0.574 x^1.61, b = -0.527 x^1.61; optical
  // seventh-order polynomials in y = x - 1.82; UV with the Fa, Fb terms above x = 5.9; far UV
  // cubics in x - 8.
  kCCM89,
  // O'Donnell 1994, ApJ 422, 158: CCM89 with the optical (1.1 <= x < 3.3) polynomials
  // replaced by eighth-order ones.
  kOD94,
  // Fitzpatrick 1999, PASP 111, 63, in the variant of the IDL astrolib routine FM_UNRED
  // (the one Debian's python3-extinction implements): Fitzpatrick & Massa UV curve below
  // 2700 A; above, a natural cubic spline in x through (0, 0), IR knots at 26500 and 12200 A
  // scaled by R_V/3.1, optical knots at 6000, 5470, 4670, 4110 A from R_V polynomials
  // updated after the paper's Table 4, and the UV curve at 2700 and 2600 A. Valid
  // 910 A to 6 um.
  kF99,
};
inline constexpr EnumTable<ExtinctionLaw, 3> kExtinctionLawNames{{{
    {ExtinctionLaw::kCCM89, "ccm89"},
    {ExtinctionLaw::kOD94, "odonnell94"},
    {ExtinctionLaw::kF99, "fitzpatrick99"},
}}};

struct WavelengthRange {
  double min_aa;  // shortest wavelength, Angstrom
  double max_aa;  // longest wavelength, Angstrom
};
WavelengthRange law_range(ExtinctionLaw law);

// A_lambda / A_V at a wavelength in Angstrom. Outside the law's range, or for R_V <= 0,
// throws InputError (rule "outside_law_range" / "config_value"): never extrapolates.
double extinction_ratio(ExtinctionLaw law, double wavelength_aa, double r_v);

}  // namespace rungcal
