// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/simulate/mock_catalog: the study's mock calibrators (simulations with
// known truth).
#include "rungcal/simulate/mock_catalog.hpp"

#include <gtest/gtest.h>

#include <cmath>

namespace rungcal {
namespace {

// Each law's range and mean against its closed form: for q ~ U(a, b) the brightening
// 2.5 log10(1 + q) has mean (2.5 / ln 10) [F(b) - F(a)] / (b - a), F(q) = (1 + q) ln(1 + q) - q.
TEST(MockCatalog, BlendLawsHaveTheirRangesAndMeans) {
  auto mean_of_companion = [](double a, double b) {
    auto F = [](double q) { return (1 + q) * std::log(1 + q) - q; };
    return 2.5 / std::log(10.0) * (F(b) - F(a)) / (b - a);
  };
  struct Case {
    MockBlendLaw law;
    double lo, hi, mean;
  };
  const Case cases[] = {
      {MockBlendLaw::kModerate, 0.3, 1.0, 0.65},
      {MockBlendLaw::kFaintCompanions, 0.0, 2.5 * std::log10(2.5), mean_of_companion(0.0, 1.5)},
      {MockBlendLaw::kBrightCompanions, 2.5 * std::log10(1.5), 2.5 * std::log10(5.0),
       mean_of_companion(0.5, 4.0)}};
  for (const Case& c : cases) {
    Random rng(11);
    const int n = 200000;
    double sum = 0, lo = 1e9, hi = -1e9;
    for (int i = 0; i < n; ++i) {
      const double b = mock_blend_brightening(c.law, rng);
      sum += b, lo = std::min(lo, b), hi = std::max(hi, b);
    }
    EXPECT_GE(lo, c.lo) << kMockBlendLawNames.name(c.law);
    EXPECT_LE(hi, c.hi) << kMockBlendLawNames.name(c.law);
    EXPECT_NEAR(hi - lo, c.hi - c.lo, 0.01) << kMockBlendLawNames.name(c.law);
    EXPECT_NEAR(sum / n, c.mean, 0.002)
        << kMockBlendLawNames.name(c.law);  // the mean's own scatter: < 0.0007
  }
  EXPECT_NEAR(mean_of_companion(0.0, 1.5), 0.5724, 1e-4);  // worked by hand: 1.08574 x 0.52715
}

// The fit-component blend law is the fit's rising component with its defaults: 0.3 mag plus
// Gamma(shape 2, scale 0.25): mean 0.8, variance 2 x 0.25^2, and CDF 1 - e^-t (1 + t) at
// t = (b - 0.3) / 0.25 (the Gamma(2) distribution; 0.2642 at t = 1).
TEST(MockCatalog, FitComponentBlendsFollowTheFitsRisingLaw) {
  Random rng(3);
  const int n = 200000;
  double sum = 0, sum2 = 0, lo = 1e9;
  int below = 0;
  for (int i = 0; i < n; ++i) {
    const double b = mock_blend_brightening(MockBlendLaw::kFitComponent, rng);
    sum += b, sum2 += b * b, lo = std::min(lo, b);
    below += b < 0.55 ? 1 : 0;
  }
  EXPECT_GE(lo, 0.3);
  EXPECT_NEAR(sum / n, 0.8, 0.003);  // its own scatter: 0.0008
  EXPECT_NEAR(sum2 / n - (sum / n) * (sum / n), 0.125, 0.002);
  EXPECT_NEAR(static_cast<double>(below) / n, 1 - 2 * std::exp(-1.0), 0.004);
}

// The gross-outlier laws: the study's shifted one lies 5-20 errors off on either side with the
// magnitude untouched; the Gaussian component is the fit's former default outlier component
// (docs/method.md, "Outliers"): parallax error x10 in all, magnitude +- 1 mag.
TEST(MockCatalog, OutlierLawsHaveTheirShapes) {
  Random rng(5);
  const int n = 20000;
  double below = 0, sum2_plx = 0, sum2_mag = 0, sum_mag = 0;
  for (int i = 0; i < n; ++i) {
    const MockOutlierShift s = mock_outlier_shift(MockOutlierLaw::kShifted, 0.02, rng);
    EXPECT_GE(std::abs(s.parallax_mas), 5 * 0.02 - 1e-12);
    EXPECT_LE(std::abs(s.parallax_mas), 20 * 0.02 + 1e-12);
    EXPECT_EQ(s.magnitude, 0.0);
    below += s.parallax_mas < 0 ? 1 : 0;
  }
  EXPECT_NEAR(below / n, 0.5, 0.015);  // 3.4 of its own sd (0.0035)
  for (int i = 0; i < n; ++i) {
    const MockOutlierShift s = mock_outlier_shift(MockOutlierLaw::kGaussianComponent, 0.02, rng);
    sum2_plx += s.parallax_mas * s.parallax_mas;
    sum2_mag += s.magnitude * s.magnitude;
    sum_mag += s.magnitude;
  }
  // Added to the member's own error 0.02, the parallax spread is 10 x 0.02 in all.
  EXPECT_NEAR(std::sqrt(sum2_plx / n + 0.02 * 0.02), 0.2, 0.004);  // sd of the sd: 0.001
  EXPECT_NEAR(std::sqrt(sum2_mag / n), 1.0, 0.02);
  EXPECT_NEAR(sum_mag / n, 0.0, 0.03);
  EXPECT_EQ(kMockOutlierLawNames.parse("gaussian_component"), MockOutlierLaw::kGaussianComponent);
  // Underestimated errors: F ~ U(5, 20) gives E[F^2] = (20^3 - 5^3) / (3 x 15) = 175 in
  // all (the added variance F^2 - 1 plus the member's own 1); the magnitude is untouched.
  double sum2 = 0;
  for (int i = 0; i < n; ++i) {
    const MockOutlierShift s = mock_outlier_shift(MockOutlierLaw::kUnderestimatedError, 0.02, rng);
    const double z2 = s.parallax_mas * s.parallax_mas / (0.02 * 0.02) + 1.0;
    sum2 += z2;
    EXPECT_EQ(s.magnitude, 0.0);
  }
  EXPECT_NEAR(sum2 / n, 175.0, 8.0);  // sd of the mean: 2.2
}

// The fit's default outlier component (docs/method.md, "Outliers"): p(e) = (e^4 / 3 s^4)
// N(e | 0, s^2), s = 6 sigma_pi, so |e| / s follows the chi distribution of five degrees of
// freedom. Reference values from scipy.stats.chi(5): mean 2.12769, cdf(1) 0.037434, cdf(2)
// 0.450584; E[e^2] = 5 s^2 and E[e^4] = 35 s^4 (the chi-squared's k and k (k + 2)). The draw is
// the whole deviation, so it replaces the member's own error and leaves the magnitude alone.
TEST(MockCatalog, QuarticComponentOutliersFollowTheFitsOwnLaw) {
  Random rng(11);
  const int n = 40000;
  const double s = kMockQuarticOutlierFactor * 0.02;
  double sum = 0, sum2 = 0, sum4 = 0, below1 = 0, below2 = 0, negative = 0;
  for (int i = 0; i < n; ++i) {
    const MockOutlierShift o = mock_outlier_shift(MockOutlierLaw::kQuarticComponent, 0.02, rng);
    EXPECT_TRUE(o.replaces_member_noise);
    EXPECT_EQ(o.magnitude, 0.0);
    const double x = std::abs(o.parallax_mas) / s;
    sum += x, sum2 += x * x, sum4 += x * x * x * x;
    below1 += x < 1 ? 1 : 0, below2 += x < 2 ? 1 : 0, negative += o.parallax_mas < 0 ? 1 : 0;
  }
  EXPECT_NEAR(sum / n, 2.12769, 0.01);       // sd of the mean: 0.0035
  EXPECT_NEAR(sum2 / n, 5.0, 0.05);          // sd of the mean: 0.016
  EXPECT_NEAR(sum4 / n, 35.0, 1.0);          // sd of the mean: about 0.3
  EXPECT_NEAR(below1 / n, 0.037434, 0.004);  // sd: 0.00095
  EXPECT_NEAR(below2 / n, 0.450584, 0.01);   // sd: 0.0025
  EXPECT_NEAR(negative / n, 0.5, 0.01);      // sd: 0.0025
  EXPECT_EQ(kMockOutlierLawNames.parse("quartic_component"), MockOutlierLaw::kQuarticComponent);
}

TEST(MockCatalog, ParallaxErrorScaleMultipliesEveryError) {
  MockScenario s;
  s.stars = 50;
  const StarTable one = mock_calibrator_catalog(s);
  s.parallax_error_scale = 3.0;
  const StarTable three = mock_calibrator_catalog(s);
  for (std::size_t i = 0; i < 50; ++i)
    EXPECT_NEAR(three.column("parallax_err_mas").as_real(i),
                3.0 * one.column("parallax_err_mas").as_real(i), 1e-12);
  s.parallax_error_scale = 0;
  EXPECT_NE(s.check().find("parallax_error_scale"), std::string::npos);
}

// Common random numbers: each contamination switched on alone changes only the columns it
// acts on, and only in the stars it strikes, in the expected share of them; every other draw of
// every star is as it was without it.
TEST(MockCatalog, SwitchingOneContaminationChangesOnlyItsOwnStars) {
  MockScenario clean;
  clean.stars = 4000;
  clean.seed = 7;
  const StarTable none = mock_calibrator_catalog(clean);
  auto changed = [&](const StarTable& t, const std::string& column) {
    int n = 0;
    for (std::size_t i = 0; i < t.rows(); ++i)
      n += t.column(column).as_real(i) != none.column(column).as_real(i);
    return n;
  };
  auto expect_same = [&](const StarTable& t, std::initializer_list<const char*> columns) {
    for (const char* c : columns) EXPECT_EQ(changed(t, c), 0) << c;
  };
  MockScenario s = clean;
  s.blend_fraction = 0.05;
  const StarTable blends = mock_calibrator_catalog(s);
  expect_same(blends, {"log_period", "feh"});
  // Blends brighten: the magnitude, and so the parallax error and its scaled noise, change.
  EXPECT_NEAR(changed(blends, "mag0_X"), 200, 45);  // binomial sd 14
  EXPECT_EQ(changed(blends, "parallax_mas"), changed(blends, "mag0_X"));
  s = clean;
  s.parallax_outlier_fraction = 0.03;
  const StarTable outliers = mock_calibrator_catalog(s);
  expect_same(outliers, {"log_period", "feh", "mag0_X", "parallax_err_mas"});
  EXPECT_NEAR(changed(outliers, "parallax_mas"), 120, 35);  // sd 11
  s = clean;
  s.feh_error = 0.08;
  const StarTable metals = mock_calibrator_catalog(s);
  expect_same(metals, {"log_period", "mag0_X", "parallax_mas"});
  EXPECT_EQ(changed(metals, "feh"), 4000);
  s = clean;
  s.overtone_fraction = 0.1;
  const StarTable overtones = mock_calibrator_catalog(s);
  expect_same(overtones, {"feh"});
  EXPECT_NEAR(changed(overtones, "log_period"), 400, 60);  // sd 19
  EXPECT_EQ(changed(overtones, "mag0_X"), changed(overtones, "log_period"));
  s = clean;
  s.far_fraction = 0.02;
  const StarTable far = mock_calibrator_catalog(s);
  expect_same(far, {"log_period", "feh"});
  EXPECT_NEAR(changed(far, "parallax_mas"), 80, 27);  // sd 9
}

// Further relations draw from streams of their own (band X is the same star by star), and their
// scatter has the asked correlation: the difference of two relations' magnitudes (distance and
// blends cancel, grey) scatters by sigma_a^2 + sigma_b^2 - 2 rho sigma_a sigma_b plus both
// photometric errors.
TEST(MockCatalog, FurtherRelationsShareTheStarsAndCorrelateTheirScatter) {
  MockScenario s;
  s.stars = 20000;
  s.blend_fraction = 0.03;
  const StarTable one = mock_calibrator_catalog(s);
  s.more_relations = {{"V", -3.9, -2.4, -0.2, 0.20, 0.0}, {"K", -5.7, -3.2, -0.2, 0.09, 0.0}};
  s.scatter_correlation = 0.8;
  const StarTable joint = mock_calibrator_catalog(s);
  for (std::size_t i = 0; i < joint.rows(); ++i)
    ASSERT_EQ(joint.column("mag0_X").as_real(i), one.column("mag0_X").as_real(i)) << i;
  auto difference_variance = [&](const std::string& b, double alpha, double beta, double gamma) {
    double sum = 0, sum2 = 0;
    for (std::size_t i = 0; i < joint.rows(); ++i) {
      // The truth's log P_F - pivot for fundamental mode stars; overtones are off here.
      const double x = joint.column("log_period").as_real(i) - s.pivot_log_period;
      const double z = joint.column("feh").as_real(i);
      const double d = joint.column("mag0_" + b).as_real(i) - joint.column("mag0_X").as_real(i) -
                       (alpha - s.alpha + (beta - s.beta) * x + (gamma - s.gamma) * z);
      sum += d, sum2 += d * d;
    }
    const double n = static_cast<double>(joint.rows());
    return sum2 / n - (sum / n) * (sum / n);
  };
  const double noise = 2 * s.mag_error * s.mag_error;
  // Sampling error of a variance: sqrt(2 / n) relative, 1% here; 4% allowed.
  EXPECT_NEAR(difference_variance("V", -3.9, -2.4, -0.2),
              0.08 * 0.08 + 0.2 * 0.2 - 2 * 0.8 * 0.08 * 0.2 + noise, 0.04 * 0.0208);
  EXPECT_NEAR(difference_variance("K", -5.7, -3.2, -0.2),
              0.08 * 0.08 + 0.09 * 0.09 - 2 * 0.8 * 0.08 * 0.09 + noise, 0.04 * 0.0030);
  EXPECT_EQ(joint.column("ebv_err").as_real(0), 0.0);
  s.scatter_correlation = 1.0;
  EXPECT_NE(s.check().find("scatter_correlation"), std::string::npos);
}

// A red companion (flux ratio 3 times X's in K): a blend 0.3-1.0 mag brighter in X (flux
// ratio q = 10^(0.4 b) - 1 in 0.318-1.512, Pogson) is 2.5 log10(1 + 3 q) brighter in K, so
// its K magnitude moves by 0.428-0.858 mag against grey blends; other stars do not move.
TEST(MockCatalog, ColouredCompanionsBrightenEachBandByTheirFluxRatio) {
  MockScenario s;
  s.stars = 20000;
  s.blend_fraction = 0.03;
  s.more_relations = {{"K", -5.7, -3.2, -0.2, 0.09, 0.0}};
  const StarTable grey = mock_calibrator_catalog(s);
  s.more_relations[0].companion_colour = 3.0;
  const StarTable red = mock_calibrator_catalog(s);
  int moved = 0;
  for (std::size_t i = 0; i < grey.rows(); ++i) {
    const double d = grey.column("mag0_K").as_real(i) - red.column("mag0_K").as_real(i);
    EXPECT_EQ(grey.column("mag0_X").as_real(i), red.column("mag0_X").as_real(i));
    if (d == 0) continue;
    ++moved;
    EXPECT_GT(d, 0.428 - 1e-3) << i;
    EXPECT_LT(d, 0.858 + 1e-3) << i;
  }
  // 3% of 20000 blended: 600 +- 24.
  EXPECT_NEAR(moved, 600, 100);
}

// Anchor galaxies: their members at the galaxy's distance in a group of their own, the truth
// naming their moduli as the fit does, and the published moduli's errors with the asked
// standard error and correlation over many seeds (2000 draws: the sd is known to 1.6%, the
// correlation to about 0.02).
TEST(MockCatalog, AnchorGalaxiesHaveCorrelatedPublishedModuli) {
  MockScenario s;
  s.stars = 20, s.anchors = 2, s.anchor_members = 5;
  s.anchor_mu_error = 0.04, s.anchor_correlation = 0.6;
  ASSERT_EQ(s.check(), "");
  const StarTable t = mock_calibrator_catalog(s);
  ASSERT_EQ(t.rows(), 30u);
  EXPECT_EQ(t.column("group").text[20], "MOCK-AN000");
  EXPECT_EQ(t.column("group").text[29], "MOCK-AN001");
  EXPECT_EQ(t.column("group").text[0], "");
  EXPECT_DOUBLE_EQ(s.truth().at("mu_MOCK-AN001").get<double>(), 18.95);
  const Eigen::MatrixXd c = mock_anchor_covariance(s);
  EXPECT_DOUBLE_EQ(c(0, 0), 0.0016);
  EXPECT_DOUBLE_EQ(c(0, 1), 0.6 * 0.0016);

  const int n = 2000;
  double s00 = 0, s11 = 0, s01 = 0;
  for (int k = 0; k < n; ++k) {
    s.seed = 100 + static_cast<std::uint64_t>(k);
    const std::vector<MockAnchor> a = mock_anchors(s);
    const double e0 = a[0].mu_published - a[0].mu_true, e1 = a[1].mu_published - a[1].mu_true;
    s00 += e0 * e0, s11 += e1 * e1, s01 += e0 * e1;
    EXPECT_DOUBLE_EQ(a[1].mu_err, 0.04);
  }
  EXPECT_NEAR(std::sqrt(s00 / n), 0.04, 0.002);
  EXPECT_NEAR(std::sqrt(s11 / n), 0.04, 0.002);
  EXPECT_NEAR(s01 / std::sqrt(s00 * s11), 0.6, 0.05);

  s.anchor_correlation = 1.0;
  EXPECT_NE(s.check().find("anchor_correlation"), std::string::npos);
}

}  // namespace
}  // namespace rungcal
