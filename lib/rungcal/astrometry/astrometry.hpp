// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/core/enum_table.hpp"

namespace rungcal {

// Gaia parallax zero-point coefficients of Lindegren et al. 2021, A&A 649, A4 (one table for
// 5-parameter, one for 6-parameter solutions), read from the published comma-separated
// files: row 1 the colour index j of each column, row 2 the latitude index k, then one row
// per G node: G, q_jk (micro-arcsec).
class ZeroPointTable {
 public:
  // Throws InputError naming file, line and rule ("zero_point_table").
  static ZeroPointTable from_file(const std::string& path);

  // Z in mas at G, colour (nu_eff for 5-parameter, pseudocolour for 6-parameter solutions,
  // in 1/um) and ecliptic latitude beta (deg): Z = sum_jk q_jk(G) c_j(colour) b_k(beta) with
  // c0 = 1, c1 = clamp(nu - 1.48, -0.24, 0.24), c2 = min(0.24, max(0, 1.48 - nu))^3,
  // c3 = min(0, nu - 1.24), c4 = max(0, nu - 1.72); b0 = 1, b1 = sin beta,
  // b2 = sin^2 beta - 1/3; q linear in G between nodes, G clamped to the nodes' range.
  // Corrected parallax = parallax - Z.
  double zero_point_mas(double g_mag, double colour, double ecl_lat_deg) const;
  const std::string& file() const { return file_; }

 private:
  std::string file_;
  std::vector<int> j_, k_;              // per coefficient column
  std::vector<double> g_;               // G nodes
  std::vector<std::vector<double>> q_;  // [node][column], micro-arcsec
};

// El-Badry, Rix & Heintz 2021, MNRAS 506, 2269, eq. 16: the factor by which Gaia EDR3
// parallax uncertainties of bright stars are underestimated,
// f(G) = 0.21 exp(-(G - 12.65)^2 / 0.81) - 0.00062 G^2 + 0.0040 G + 1.141.
double el_badry_inflation(double g_mag);

// Ecliptic latitude beta (deg) of an ICRS direction (ra, dec in deg), in the mean ecliptic
// and equinox of J2000.0: the frame astropy calls BarycentricMeanEcliptic (equinox J2000),
// for a direction without parallax. The ICRS unit vector is rotated by the frame bias
// B = R1(-eta0) R2(xi0) R3(da0) onto the mean equator and equinox of J2000 (IERS Conventions
// 2010, section 5.5.1: xi0 = -16.6170 mas, eta0 = -6.8192 mas, da0 = -14.6 mas), then by the
// obliquity about the equinox direction, sin beta = -sin(eps) y + cos(eps) z, with eps the
// IAU 2006 obliquity at J2000.0, 84381.406 arcsec = 23.4392794 deg (Capitaine, Wallace &
// Chapront 2003, A&A 412, 567). Without the bias beta moves by up to about 0.02 arcsec; the
// Gaia archive's own ecl_lat agrees with this to a few mas. Input of the Lindegren et al. 2021
// zero point, which takes sin beta.
double ecliptic_latitude_deg(double ra_deg, double dec_deg);

enum class ZeroPointRecipe { kNone, kConstant, kLindegren2021 };
inline constexpr EnumTable<ZeroPointRecipe, 3> kZeroPointRecipeNames{{{
    {ZeroPointRecipe::kNone, "none"},
    {ZeroPointRecipe::kConstant, "constant"},
    {ZeroPointRecipe::kLindegren2021, "lindegren2021"},
}}};

enum class InflationRecipe { kNone, kConstant, kElBadry2021 };
inline constexpr EnumTable<InflationRecipe, 3> kInflationRecipeNames{{{
    {InflationRecipe::kNone, "none"},
    {InflationRecipe::kConstant, "constant"},
    {InflationRecipe::kElBadry2021, "elbadry2021"},
}}};

}  // namespace rungcal
