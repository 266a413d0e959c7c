// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/photometry: distance equations, intensity means, fundamentalized
// periods, band coefficients and Wesenheit coefficients from config/bands.toml.
#include <gtest/gtest.h>

#include <cmath>

#include "rungcal/photometry/bands.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

TEST(Photometry, DistanceEquations) {
  // Photometry-equation check (common practice, no source): M = -4, m = 26, no extinction
  // -> mu = 30, d = 10 Mpc, parallax 1e-4 mas.
  double mu = 26.0 - (-4.0);
  EXPECT_DOUBLE_EQ(mu, 30.0);
  EXPECT_NEAR(parsec_from_distance_modulus(mu), 1e7, 1e-6);
  EXPECT_NEAR(distance_modulus_from_parsec(1e7), 30.0, 1e-12);
  EXPECT_NEAR(parallax_mas_from_magnitudes(26.0, -4.0), 1e-4, 1e-16);
  EXPECT_NEAR(distance_modulus_from_parallax_mas(1.0), 10.0, 1e-12);  // 1 mas = 1 kpc
}

TEST(Photometry, IntensityMeanOfASinusoid) {
  // Method brief, section 5: <m> - m0 = -2.5 log10 I0(0.921034 A).
  EXPECT_NEAR(sinusoid_intensity_mean_offset(0.1), -0.002301, 1e-6);
  EXPECT_NEAR(sinusoid_intensity_mean_offset(0.5), -0.056819, 1e-6);
  EXPECT_NEAR(sinusoid_intensity_mean_offset(1.0), -0.219088, 1e-6);
}

TEST(Photometry, FundamentalizedPeriod) {
  // Method brief, section 4 (memory: Feast & Catchpole 1997): 1 d -> 1.39665 d.
  EXPECT_NEAR(fundamentalized_period(1.0), 1.39665, 1e-5);
  EXPECT_NEAR(fundamentalized_period(first_overtone_period_for(5.0)), 5.0, 1e-10);
}

TEST(Bands, WesenheitCoefficientsFromTheBandTable) {
  BandTable t = BandTable::from_file(test::source_file("config/bands.toml"));
  // R for I with V - I under O'Donnell 1994 at R_V = 3.1 from the table's wavelengths:
  // optical surveys of the Magellanic Clouds use 1.55 (memory); the law gives 1.53 here.
  WesenheitDef vi{"W", "I", "V", "I", std::nullopt, ""};
  EXPECT_NEAR(wesenheit_coefficient(vi, t, ExtinctionLaw::kOD94, 3.1), 1.55, 0.03);
  // Gaia's documented 1.90 (Ripepi et al. 2019, A&A 625, A14) is reproduced when given.
  ASSERT_NE(t.find_wesenheit("W_G"), nullptr);
  EXPECT_DOUBLE_EQ(wesenheit_coefficient(*t.find_wesenheit("W_G"), t, ExtinctionLaw::kOD94, 3.1),
                   1.90);
  // HST near-infrared: the law's value lands near the published 0.386 (memory).
  WesenheitDef h{"W", "F160W", "F555W", "F814W", std::nullopt, ""};
  EXPECT_NEAR(wesenheit_coefficient(h, t, ExtinctionLaw::kF99, 3.1), 0.386, 0.01);
  // A given A/E(B-V) overrides the law.
  Band b{"X", "", 5500.0, WavelengthKind::kPivot, "", 2.5};
  EXPECT_DOUBLE_EQ(band_coefficient(b, ExtinctionLaw::kCCM89, 3.1), 2.5);
}

}  // namespace
}  // namespace rungcal
