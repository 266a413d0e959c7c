// SPDX-License-Identifier: MIT
#include "rungcal/astrometry/astrometry.hpp"

#include <algorithm>
#include <cmath>
#include <fstream>
#include <numbers>
#include <sstream>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

double colour_term(int j, double nu) {
  switch (j) {
    case 0:
      return 1.0;
    case 1:
      return std::clamp(nu - 1.48, -0.24, 0.24);
    case 2:
      return std::pow(std::min(0.24, std::max(0.0, 1.48 - nu)), 3);
    case 3:
      return std::min(0.0, nu - 1.24);
    case 4:
      return std::max(0.0, nu - 1.72);
  }
  return 0.0;
}

double latitude_term(int k, double sin_beta) {
  switch (k) {
    case 0:
      return 1.0;
    case 1:
      return sin_beta;
    case 2:
      return sin_beta * sin_beta - 1.0 / 3.0;
  }
  return 0.0;
}

}  // namespace

ZeroPointTable ZeroPointTable::from_file(const std::string& path) {
  check_input_file(path);
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError({path, {}, {}}, "unreadable_file", "cannot open the zero-point table");
  std::vector<std::vector<double>> rows;
  std::vector<std::int64_t> lines;
  std::string line;
  for (std::int64_t n = 1; std::getline(in, line); ++n) {
    if (line.find_first_not_of(" \t\r") == std::string::npos) continue;
    std::vector<double> row;
    std::stringstream ss(line);
    std::string cell;
    for (int col = 1; std::getline(ss, cell, ','); ++col) {
      std::size_t used = 0;
      double v = 0;
      try {
        v = std::stod(cell, &used);  // accepts a leading '+' and surrounding blanks
      } catch (...) {
        used = 0;
      }
      if (used == 0 || cell.find_first_not_of(" \t\r", used) != std::string::npos)
        throw InputError({path, n, std::to_string(col), "line"}, "zero_point_table",
                         "'" + cell + "' is not a number");
      // Coefficients are micro-arcsec, tens of them at most (Lindegren et al. 2021, Table 9-10).
      if (!std::isfinite(v) || std::abs(v) > 1e4)
        throw InputError(
            {path, n, std::to_string(col), "line"}, "zero_point_table",
            "'" + cell +
                "' is not a plausible coefficient (finite, |value| <= 10000 micro-arcsec)");
      row.push_back(v);
    }
    if (!rows.empty() && row.size() != rows.front().size())
      throw InputError(
          {path, n, {}, "line"}, "zero_point_table",
          fmt::format("{} values where the first line has {}", row.size(), rows.front().size()));
    rows.push_back(std::move(row));
    lines.push_back(n);
  }
  if (rows.size() < 4 || rows.front().size() < 2)
    throw InputError({path, {}, {}}, "zero_point_table",
                     "expected an index row, a latitude row and two or more G nodes");
  ZeroPointTable t;
  t.file_ = path;
  for (std::size_t c = 1; c < rows[0].size(); ++c) {
    t.j_.push_back(static_cast<int>(rows[0][c]));
    t.k_.push_back(static_cast<int>(rows[1][c]));
    if (t.j_.back() < 0 || t.j_.back() > 4 || t.k_.back() < 0 || t.k_.back() > 2)
      throw InputError({path, lines[0], std::to_string(c + 1), "line"}, "zero_point_table",
                       "colour index must be 0-4 and latitude index 0-2");
  }
  for (std::size_t r = 2; r < rows.size(); ++r) {
    t.g_.push_back(rows[r][0]);
    t.q_.emplace_back(rows[r].begin() + 1, rows[r].end());
    if (t.g_.size() > 1 && !(t.g_.back() > t.g_[t.g_.size() - 2]))
      throw InputError({path, lines[r], "1", "line"}, "zero_point_table", "G nodes must increase");
  }
  return t;
}

double ZeroPointTable::zero_point_mas(double g_mag, double colour, double ecl_lat_deg) const {
  double g = std::clamp(g_mag, g_.front(), g_.back());
  std::size_t i = 0;
  while (i + 2 < g_.size() && g > g_[i + 1]) ++i;
  double w = (g - g_[i]) / (g_[i + 1] - g_[i]);
  double sin_beta = std::sin(ecl_lat_deg * std::numbers::pi / 180.0);
  double z_uas = 0.0;
  for (std::size_t c = 0; c < j_.size(); ++c) {
    double q = (1.0 - w) * q_[i][c] + w * q_[i + 1][c];
    z_uas += q * colour_term(j_[c], colour) * latitude_term(k_[c], sin_beta);
  }
  return z_uas * 1e-3;
}

double el_badry_inflation(double g) {
  return 0.21 * std::exp(-(g - 12.65) * (g - 12.65) / 0.81) - 0.00062 * g * g + 0.0040 * g + 1.141;
}

double ecliptic_latitude_deg(double ra_deg, double dec_deg) {
  constexpr double kDeg = std::numbers::pi / 180.0;
  constexpr double kMas = kDeg / 3.6e6;
  constexpr double kXi0 = -16.6170 * kMas, kEta0 = -6.8192 * kMas, kDa0 = -14.6 * kMas;
  constexpr double kObliquity = 84381.406 / 3600.0 * kDeg;
  const double ra = ra_deg * kDeg, dec = dec_deg * kDeg;
  double x = std::cos(dec) * std::cos(ra), y = std::cos(dec) * std::sin(ra), z = std::sin(dec);
  // R3(da0), R2(xi0), R1(-eta0) in turn, each an exact rotation (the angles are tiny, but
  // exact rotations keep the vector a unit vector).
  auto rotate = [](double angle, double& a, double& b) {
    const double c = std::cos(angle), s = std::sin(angle);
    const double a2 = c * a + s * b;
    b = -s * a + c * b;
    a = a2;
  };
  rotate(kDa0, x, y);    // R3: x' = c x + s y, y' = -s x + c y
  rotate(kXi0, z, x);    // R2: z' = s x + c z, x' = c x - s z
  rotate(-kEta0, y, z);  // R1: y' = c y + s z, z' = -s y + c z
  const double sin_beta = -std::sin(kObliquity) * y + std::cos(kObliquity) * z;
  return std::asin(std::clamp(sin_beta, -1.0, 1.0)) / kDeg;
}

}  // namespace rungcal
