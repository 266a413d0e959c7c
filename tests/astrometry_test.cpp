// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/astrometry: the Gaia EDR3 parallax zero point of Lindegren et al.
// 2021 (A&A 649, A4) from the published coefficient tables, and the parallax-error
// inflation of El-Badry, Rix & Heintz 2021 (MNRAS 506, 2269, eq. 16).
#include <gtest/gtest.h>

#include <cmath>

#include <fmt/format.h>

#include "rungcal/astrometry/astrometry.hpp"
#include "rungcal/core/error.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

TEST(Lindegren2021, ReproducesTheCheckValuesOfThePublishedTable) {
  // Check values recomputed from the published 5-parameter table, given beside it in
  // ../shared/reference/README.md (micro-arcsec).
  const ZeroPointTable t =
      ZeroPointTable::from_file(test::reference_file("parallax_zeropoint_5p.txt"));
  EXPECT_NEAR(t.zero_point_mas(15.0, 1.48, 0.0) * 1e3, -43.438, 5e-4);
  EXPECT_NEAR(t.zero_point_mas(8.0, 1.55, 30.0) * 1e3, -32.428, 5e-4);
  EXPECT_NEAR(t.zero_point_mas(17.0, 1.40, -45.0) * 1e3, -29.188, 5e-4);
}

// An independent numpy evaluation of Z = sum_jk q_jk(G) c_j(nu) b_k(beta) (Lindegren et al.
// 2021, appendix A: the colour and latitude basis functions, q linear in G between the
// table's nodes and clamped outside them), at points spanning every clamp of the basis.
constexpr const char* kNumpyZeroPoint = R"(
import sys, numpy as np
t = np.genfromtxt(sys.argv[1], delimiter=',')
j, k, g, q = t[0, 1:].astype(int), t[1, 1:].astype(int), t[2:, 0], t[2:, 1:]
def z(G, nu, beta):
    c = [1.0, np.clip(nu - 1.48, -0.24, 0.24), min(0.24, max(0.0, 1.48 - nu))**3, min(0.0, nu - 1.24), max(0.0, nu - 1.72)]
    s = np.sin(np.radians(beta)); b = [1.0, s, s*s - 1.0/3.0]
    G = np.clip(G, g[0], g[-1])
    qi = np.array([np.interp(G, g, q[:, i]) for i in range(q.shape[1])])
    return sum(qi[i] * c[j[i]] * b[k[i]] for i in range(len(j))) / 1000.0
for G in (5.0, 6.0, 9.3, 10.8, 11.0, 12.4, 13.0, 15.5, 17.9, 19.5, 21.0, 22.0):
    for nu in (1.1, 1.24, 1.30, 1.48, 1.60, 1.72, 1.80, 1.95):
        for beta in (-80.0, -20.0, 0.0, 45.0, 89.0):
            print(G, nu, beta, repr(z(G, nu, beta)))
)";

TEST(Lindegren2021, AgreesWithAnIndependentNumpyEvaluationOverTheWholeTable) {
  for (const char* name : {"parallax_zeropoint_5p.txt", "parallax_zeropoint_6p.txt"}) {
    const std::string path = test::reference_file(name);
    const ZeroPointTable t = ZeroPointTable::from_file(path);
    auto py = test::run_python(kNumpyZeroPoint, {path});
    ASSERT_EQ(py.exit_code, 0) << py.output;
    const std::vector<double> v = test::parse_numbers(py.output);
    ASSERT_EQ(v.size(), 12u * 8u * 5u * 4u) << py.output.substr(0, 500);
    for (std::size_t i = 0; i < v.size(); i += 4)
      EXPECT_NEAR(t.zero_point_mas(v[i], v[i + 1], v[i + 2]), v[i + 3], 1e-12)
          << name << " G " << v[i] << " nu " << v[i + 1] << " beta " << v[i + 2];
  }
}

TEST(Lindegren2021, ABrokenTableIsRefusedNamingItsLine) {
  test::TempDir dir;
  std::string text = test::read_text(test::reference_file("parallax_zeropoint_5p.txt"));
  text.replace(text.find("-27.23"), 6, "-27.x3");
  test::write_text(dir.file("zp.txt"), text);
  try {
    ZeroPointTable::from_file(dir.file("zp.txt"));
    ADD_FAILURE() << "a non-number coefficient was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "zero_point_table");
    EXPECT_NE(std::string(e.what()).find("line 4"), std::string::npos) << e.what();
  }
}

TEST(EclipticLatitude, OfTheEquinoxesAndSolsticesIsTheObliquity) {
  // Geometry: the equator's points at RA 90 and 270 deg lie the obliquity below and above the
  // ecliptic, and RA 0 lies on it; the IAU 2006 obliquity at J2000.0 is 84381.406 arcsec
  // (Capitaine, Wallace & Chapront 2003). The frame bias moves these by under 0.03 arcsec.
  const double eps = 84381.406 / 3600.0;
  EXPECT_NEAR(ecliptic_latitude_deg(90.0, 0.0), -eps, 1e-5);
  EXPECT_NEAR(ecliptic_latitude_deg(270.0, 0.0), eps, 1e-5);
  EXPECT_NEAR(ecliptic_latitude_deg(0.0, 0.0), 0.0, 1e-5);
  EXPECT_NEAR(ecliptic_latitude_deg(270.0, 90.0 - eps), 90.0, 1e-4);  // the north ecliptic pole
}

TEST(ElBadry2021, InflationFollowsEquation16) {
  // f(G) = 0.21 exp(-(G - 12.65)^2 / 0.81) - 0.00062 G^2 + 0.0040 G + 1.141 (El-Badry, Rix
  // & Heintz 2021, eq. 16), evaluated here by hand at the bump's centre and far from it.
  EXPECT_NEAR(el_badry_inflation(12.65), 0.21 - 0.00062 * 12.65 * 12.65 + 0.0040 * 12.65 + 1.141,
              1e-12);
  EXPECT_NEAR(el_badry_inflation(12.65), 1.302386, 1e-6);
  EXPECT_NEAR(el_badry_inflation(18.0),
              -0.00062 * 324.0 + 0.072 + 1.141 + 0.21 * std::exp(-5.35 * 5.35 / 0.81), 1e-12);
  // The paper's finding, recalled from memory: bright stars' errors are underestimated by
  // up to about 30 per cent, with the worst near G = 13.
  double worst_g = 0, worst = 0;
  for (double g = 6; g <= 18; g += 0.01)
    if (el_badry_inflation(g) > worst) worst = el_badry_inflation(g), worst_g = g;
  EXPECT_NEAR(worst_g, 12.6, 0.2);
  EXPECT_NEAR(worst, 1.3, 0.02);
}

}  // namespace
}  // namespace rungcal
