// SPDX-License-Identifier: MIT
// The fit's Gaussian priors as whitened rows, correlated anchor moduli, and their checks.
#include "rungcal/plfit/priors.hpp"

#include <gtest/gtest.h>

#include <cmath>

#include <Eigen/Dense>

#include "mock_samples.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// Three anchors after alpha, beta, offset, sigma_int, with a prior on alpha as well.
struct ThreeAnchors {
  FitSettings s;
  ParameterLayout L;
  Eigen::MatrixXd C;
  ThreeAnchors() {
    s.terms.n_anchors = 3;
    L = ParameterLayout::for_terms(s.terms, {"A", "B", "C"});
    s.params.assign(static_cast<std::size_t>(L.size), ParamSpec{});
    s.params[static_cast<std::size_t>(L.alpha)] = ParamSpec{ParamMode::kPrior, -5.9, 0.2, true};
    C.resize(3, 3);
    C << 0.0009, 0.0006, 0.0002, 0.0006, 0.0016, 0.0003, 0.0002, 0.0003, 0.0025;
    const double centre[3] = {18.48, 18.97, 24.4};
    for (int g = 0; g < 3; ++g)
      s.params[static_cast<std::size_t>(L.anchor0 + g)] =
          ParamSpec{ParamMode::kPrior, centre[g], std::sqrt(C(g, g)), true};
    s.anchor_prior_correlation = correlation_of(C);
  }
};

TEST(Priors, IndependentPriorsAreOneRowEachWithWeightOneOverSigma) {
  ThreeAnchors a;
  a.s.anchor_prior_correlation.resize(0, 0);
  const auto rows = prior_rows(a.s, a.L);
  ASSERT_EQ(rows.size(), 4u);
  EXPECT_EQ(rows[0].params, std::vector<int>{a.L.alpha});
  EXPECT_DOUBLE_EQ(rows[0].weights[0], 5.0);
  EXPECT_DOUBLE_EQ(rows[3].weights[0], 1.0 / 0.05);
}

TEST(Priors, CorrelatedRowsSumToTheMultivariateGaussianQuadraticForm) {
  // -2 ln p of N(c, C) is (mu - c)^T C^-1 (mu - c) (the multivariate normal's definition),
  // computed here with Eigen's dense inverse, independently of the rows' Cholesky factor.
  ThreeAnchors a;
  const auto rows = prior_rows(a.s, a.L);
  ASSERT_EQ(rows.size(), 4u);  // alpha, then one row per anchor
  Eigen::VectorXd t = Eigen::VectorXd::Zero(a.L.size);
  t[a.L.alpha] = -5.7;
  const Eigen::Vector3d mu(18.51, 18.93, 24.47), c(18.48, 18.97, 24.4);
  for (int g = 0; g < 3; ++g) t[a.L.anchor0 + g] = mu[g];
  double sum = 0;
  for (const PriorRow& row : rows) sum += std::pow(prior_residual(row, a.s, t.data()), 2);
  const double expected = std::pow(0.2 / 0.2, 2) + (mu - c).dot(a.C.inverse() * (mu - c));
  EXPECT_NEAR(sum, expected, 1e-10 * expected);
}

TEST(Priors, RedrawnCentresHaveTheAnchorsCovariance) {
  ThreeAnchors a;
  Random rng(5);
  const int n = 40000;
  Eigen::MatrixXd draws(n, 3);
  for (int k = 0; k < n; ++k) {
    FitSettings d = a.s;
    redraw_prior_centres(d, a.L, rng);
    for (int g = 0; g < 3; ++g)
      draws(k, g) = d.params[static_cast<std::size_t>(a.L.anchor0 + g)].value;
  }
  const Eigen::RowVectorXd mean = draws.colwise().mean();
  const Eigen::MatrixXd centred = draws.rowwise() - mean;
  const Eigen::MatrixXd sample = centred.transpose() * centred / (n - 1);
  // A sample covariance of n draws scatters by about sqrt((C_ii C_jj + C_ij^2) / n): 4 of those.
  for (int i = 0; i < 3; ++i)
    for (int j = 0; j < 3; ++j)
      EXPECT_NEAR(sample(i, j), a.C(i, j),
                  4 * std::sqrt((a.C(i, i) * a.C(j, j) + a.C(i, j) * a.C(i, j)) / n))
          << i << j;
}

TEST(Priors, AnchorCovarianceChecksNameTheBrokenRule) {
  Eigen::MatrixXd C(2, 2);
  C << 0.0009, 0.0002, 0.0002, 0.0016;
  EXPECT_EQ(check_anchor_covariance(C, 2), "");
  EXPECT_NE(check_anchor_covariance(C, 3).find("must be 3 x 3"), std::string::npos);
  Eigen::MatrixXd asymmetric = C;
  asymmetric(0, 1) = 0.0003;
  EXPECT_NE(check_anchor_covariance(asymmetric, 2).find("symmetric"), std::string::npos);
  Eigen::MatrixXd singular(2, 2);
  singular << 0.0009, 0.0012, 0.0012, 0.0016;  // correlation 1
  EXPECT_NE(check_anchor_covariance(singular, 2).find("positive definite"), std::string::npos);
  Eigen::MatrixXd negative = C;
  negative(1, 1) = -0.0016;
  EXPECT_NE(check_anchor_covariance(negative, 2).find("diagonal must be positive"),
            std::string::npos);
}

TEST(Priors, TheConfigReadsTheCovarianceAndRefusesABadOne) {
  test::TempDir dir;
  const std::string base =
      "[fit]\ninput = \"cat.fits\"\n[[relation]]\nname = \"X\"\nband = \"X\"\n"
      "[[anchor]]\ngroup = \"Kessel Cloud\"\nmu = 18.5\n[[anchor]]\ngroup = \"Orrin Cloud\"\nmu = "
      "18.9\n";
  auto with = [&](const std::string& key) {
    std::string text = base;
    text.insert(text.find("[[relation]]"), key + "\n");
    test::write_text(dir.file("fit.toml"), text);
    return dir.file("fit.toml");
  };
  FitOptions o =
      fit_options_from_file(with("anchor_covariance = [[0.0009, 0.0006], [0.0006, 0.0016]]"));
  ASSERT_EQ(o.anchor_covariance.rows(), 2);
  EXPECT_DOUBLE_EQ(o.anchor_covariance(1, 0), 0.0006);
  auto refusal = [&](const std::string& key) {
    try {
      fit_options_from_file(with(key));
    } catch (const InputError& e) {
      return std::string(e.what());
    }
    return std::string("accepted");
  };
  EXPECT_NE(refusal("anchor_covariance = [[0.0009, 0.0006], [0.0005, 0.0016]]").find("symmetric"),
            std::string::npos);
  EXPECT_NE(
      refusal("anchor_covariance = [[0.0009, 0.0012], [0.0012, 0.0016]]").find("positive definite"),
      std::string::npos);
  EXPECT_NE(refusal("anchor_covariance = [[0.0009, 0.0006], [0.0006]]").find("row 2 has 1 entries"),
            std::string::npos);
  EXPECT_NE(refusal("anchor_covariance = [[0.0009]]").find("must be 2 x 2"), std::string::npos);
  // Without a covariance each anchor needs its own mu_err.
  EXPECT_NE(refusal("").find("anchor.mu_err"), std::string::npos);
}

// The anchors' moduli under a correlated prior, with every other parameter fixed and the
// mixtures off: the posterior is the conjugate Gaussian one, precision P = C^-1 + diag(n_g / V)
// and mean P^-1 (C^-1 c + sum_i (m_i - M_i) / V) (e.g. Gelman et al., Bayesian Data Analysis,
// 3rd ed., section 3.5). The hierarchical fit must give that mean and covariance.
TEST(Priors, CorrelatedAnchorsGiveTheConjugateGaussianPosterior) {
  test::MockSample m = test::mock_parallax_sample(82, 40, 0.0);
  StarTable t = catalog_from_mock(m);
  t.add_column("group", ColumnType::kText);  // null for the parallax stars already there
  Random rng(83);
  const double sigma_int = 0.08, mag_err = 0.02, var = sigma_int * sigma_int + mag_err * mag_err;
  const std::string names[2] = {"Kessel Cloud", "Orrin Cloud"};
  const double truth[2] = {18.48, 18.95};
  const int count[2] = {12, 20};
  Eigen::Vector2d sum_offsets = Eigen::Vector2d::Zero();
  for (int g = 0; g < 2; ++g)
    for (int i = 0; i < count[g]; ++i) {
      const double x = rng.uniform(-0.6, 0.8), abs_mag = m.truth.alpha + m.truth.beta * x;
      const double mag = abs_mag + truth[g] + rng.normal(0, std::sqrt(var));
      sum_offsets[g] += mag - abs_mag;
      t.column("id").push_text(names[g].substr(0, 1) + std::to_string(i));
      t.column("mode").push_text("fundamental");
      t.column("pulsator_class").push_text("classical_cepheid");
      t.column("log_period").push_real(x + 1.0);
      t.column("mag0_X").push_real(mag);
      t.column("mag0_err_X").push_real(mag_err);
      t.column("parallax_mas").push_null();
      t.column("parallax_err_mas").push_null();
      t.column("group").push_text(names[g]);
    }
  FitOptions o = test::mock_fit_options();
  o.relations[0].alpha = ParamSpec{ParamMode::kFixed, m.truth.alpha, 0, false};
  o.relations[0].slope = ParamSpec{ParamMode::kFixed, m.truth.beta, 0, false};
  o.offset = ParamSpec{ParamMode::kFixed, m.truth.offset, 0, false};
  o.scatter = ParamSpec{ParamMode::kFixed, sigma_int, 0, false};
  o.outlier_fraction = ParamSpec{ParamMode::kFixed, 0.0, 0, false};
  o.blend_fraction = ParamSpec{ParamMode::kFixed, 0.0, 0, false};
  o.anchors = {{names[0], 18.50, 0}, {names[1], 18.90, 0}};
  Eigen::Matrix2d C;
  C << 0.03 * 0.03, 0.8 * 0.03 * 0.05, 0.8 * 0.03 * 0.05, 0.05 * 0.05;
  o.anchor_covariance = C;
  ASSERT_EQ(o.check(), "");
  FitResult r = run_fit(o, t);
  const RelationResult& rr = r.relations[0];
  ASSERT_TRUE(rr.covariance_ok);

  const Eigen::Matrix2d Cinv = C.inverse();
  const Eigen::Matrix2d P =
      Cinv + Eigen::Vector2d(count[0] / var, count[1] / var).asDiagonal().toDenseMatrix();
  const Eigen::Vector2d mean =
      P.inverse() * (Cinv * Eigen::Vector2d(18.50, 18.90) + sum_offsets / var);
  const Eigen::Matrix2d cov = P.inverse();
  const int a = rr.layout.anchor0;
  EXPECT_NEAR(rr.parameter("mu_Kessel Cloud"), mean[0], 1e-5);
  EXPECT_NEAR(rr.parameter("mu_Orrin Cloud"), mean[1], 1e-5);
  EXPECT_NEAR(rr.covariance(a, a), cov(0, 0), 1e-3 * cov(0, 0));
  EXPECT_NEAR(rr.covariance(a + 1, a + 1), cov(1, 1), 1e-3 * cov(1, 1));
  EXPECT_NEAR(rr.covariance(a, a + 1), cov(0, 1), 1e-3 * cov(0, 0));
  // Independent priors would give a different answer: the correlation matters here.
  o.anchor_covariance.resize(0, 0);
  o.anchors = {{names[0], 18.50, 0.03}, {names[1], 18.90, 0.05}};
  FitResult independent = run_fit(o, t);
  EXPECT_GT(std::abs(independent.relations[0].parameter("mu_Orrin Cloud") - mean[1]), 1e-3);
}

}  // namespace
}  // namespace rungcal
