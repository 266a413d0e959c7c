// SPDX-License-Identifier: MIT
// The hierarchical fit's sandwich covariance (likelihood_solver.hpp, sandwich_from_hessian;
// hierarchical_covariance's `sandwich`): against the closed form of a linear regression's
// heteroskedasticity-consistent covariance, and through the fit stage.
#include <gtest/gtest.h>

#include <cmath>

#include <Eigen/Dense>

#include "mock_samples.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// N stars of known distance, m - mu = alpha + beta x + e, with e's true spread growing with x
// while the model has one sigma_int: the model is wrong, as the sandwich allows.
FitData heteroskedastic_regression(int n, std::uint64_t seed) {
  FitData d;
  Random rng(seed);
  for (Eigen::ArrayXd* a :
       {&d.known.x, &d.known.xl, &d.known.feh, &d.known.m0, &d.known.var_m, &d.mu, &d.var_mu})
    a->resize(n);
  for (int i = 0; i < n; ++i) {
    const double x = rng.uniform(-0.5, 0.8), mu = rng.uniform(10.0, 14.0);
    d.known.x[i] = x, d.known.xl[i] = 0, d.known.feh[i] = 0;
    const double spread = 0.03 + 0.4 * (x + 0.5) * (x + 0.5);  // 0.03 to 0.71 mag
    d.known.m0[i] = mu - 5.8 - 3.2 * x + rng.normal(0.0, spread);
    d.known.var_m[i] = 0.02 * 0.02 - 1e-10, d.mu[i] = mu, d.var_mu[i] = 1e-10;
    d.known.row.push_back(static_cast<std::size_t>(i));
  }
  return d;
}

// alpha, beta and sigma_int free; every other parameter held.
struct RegressionFit {
  ParameterLayout L;
  FitSettings settings;
  FitSolution ml;
};

// beta_prior_sigma > 0: a Gaussian prior on beta about -3.25 of that width.
RegressionFit fit_regression(const FitData& d, double beta_prior_sigma) {
  RegressionFit f;
  ModelTerms terms;
  terms.hierarchical = true;
  f.L = ParameterLayout::for_terms(terms, {});
  const ParameterLayout& L = f.L;
  f.settings.space = FitSpace::kHierarchical;
  f.settings.terms = terms;
  f.settings.params.assign(static_cast<std::size_t>(L.size), ParamSpec{});
  Eigen::VectorXd start = Eigen::VectorXd::Zero(L.size);
  start[L.alpha] = -5.7, start[L.beta] = -3.0, start[L.sigma] = 0.1;
  start[L.outlier_width] = 1.0, start[L.distance_scale] = 1.0, start[L.distance_power] = 2.0,
  start[L.distance_exponent] = 1.0, start[L.outlier_factor] = 10.0;
  for (int j : {L.offset, L.outlier, L.outlier_shift, L.outlier_width, L.outlier_factor,
                L.distance_scale, L.distance_power, L.distance_exponent})
    f.settings.params[static_cast<std::size_t>(j)] =
        ParamSpec{ParamMode::kFixed, start[j], 0, true};
  if (beta_prior_sigma > 0)
    f.settings.params[static_cast<std::size_t>(L.beta)] =
        ParamSpec{ParamMode::kPrior, -3.25, beta_prior_sigma, true};
  f.ml = solve_hierarchical(d, f.settings, L, start);
  return f;
}

// The sandwich against White's (1980, Econometrica 48, 817) heteroskedasticity-consistent
// covariance of a Gaussian linear regression, written out here in (alpha, beta, ln sigma)
// with MacKinnon & White's (1985, J. Econometrics 29, 305) HC1 factor n / (n - p): per star,
// r = y - alpha - beta x, V = v + s^2 (u = s^2),
//   scores: r / V, r x / V, u (r^2 / V - 1) / V
//   -d2 ln L: 1 / V, x / V, x^2 / V; 2 u r / V^2, 2 u r x / V^2;
//             -2 u [(r^2 / V - 1) / V - u r^2 / V^3 - u (r^2 / V - 1) / V^2]
// and var sigma = s^2 var ln s (the delta method). With a Gaussian prior of width w on beta,
// 1 / w^2 joins H and the meat at (beta, beta) as the model's information, and p = 3 - tr(H^-1
// R), R that prior's Hessian. The fit's Hessian comes from differences of its analytic
// gradient and its scores from its own accumulators: agreement checks both.
void expect_heteroskedasticity_consistent(double beta_prior_sigma) {
  const int n = 150;
  const FitData d = heteroskedastic_regression(n, 11);
  RegressionFit f = fit_regression(d, beta_prior_sigma);
  ASSERT_TRUE(f.ml.usable) << f.ml.message;
  const ParameterLayout& L = f.L;
  Eigen::MatrixXd hessian_cov, sandwich;
  std::vector<std::string> undetermined;
  ASSERT_TRUE(hierarchical_covariance(d, f.settings, L, f.ml.theta, hessian_cov, undetermined,
                                      nullptr, &sandwich));
  ASSERT_EQ(sandwich.rows(), L.size);

  const double a = f.ml.theta[L.alpha], b = f.ml.theta[L.beta], s = f.ml.theta[L.sigma];
  const double u = s * s, V = 0.02 * 0.02 + u;
  Eigen::Matrix3d H = Eigen::Matrix3d::Zero(), B = Eigen::Matrix3d::Zero(),
                  R = Eigen::Matrix3d::Zero();
  for (int i = 0; i < n; ++i) {
    const double x = d.known.x[i], r = d.known.m0[i] - d.mu[i] - a - b * x;
    const double z = r * r / V - 1.0;
    const Eigen::Vector3d score(r / V, r * x / V, u * z / V);
    B += score * score.transpose();
    Eigen::Matrix3d h;
    h(0, 0) = 1 / V, h(0, 1) = x / V, h(1, 1) = x * x / V;
    h(0, 2) = 2 * u * r / (V * V), h(1, 2) = 2 * u * r * x / (V * V);
    h(2, 2) = -2 * u * (z / V - u * r * r / (V * V * V) - u * z / (V * V));
    h(1, 0) = h(0, 1), h(2, 0) = h(0, 2), h(2, 1) = h(1, 2);
    H += h;
  }
  if (beta_prior_sigma > 0) R(1, 1) = 1.0 / (beta_prior_sigma * beta_prior_sigma);
  H += R;
  const Eigen::Matrix3d Hinv = H.inverse();
  const double p = 3.0 - (Hinv * R).trace();
  const Eigen::Matrix3d C = Hinv * (n / (n - p) * B + R) * Hinv;
  const int idx[3] = {L.alpha, L.beta, L.sigma};
  const double scale[3] = {1.0, 1.0, s};  // d sigma / d ln sigma
  for (int i = 0; i < 3; ++i)
    for (int k = 0; k < 3; ++k)
      EXPECT_NEAR(sandwich(idx[i], idx[k]) / (scale[i] * scale[k] * C(i, k)), 1.0, 1e-4)
          << L.names[static_cast<std::size_t>(idx[i])] << ", "
          << L.names[static_cast<std::size_t>(idx[k])] << ", prior " << beta_prior_sigma;
  // The check can fail: the spread growing with x widens beta's error past the model's (less
  // so beside a prior, whose information is the model's: 1.09 against 1.23 here).
  EXPECT_GT(std::sqrt(sandwich(L.beta, L.beta) / hessian_cov(L.beta, L.beta)),
            beta_prior_sigma > 0 ? 1.05 : 1.15);
}

TEST(HierarchicalSandwich, EqualsTheHeteroskedasticityConsistentCovarianceOfARegression) {
  expect_heteroskedasticity_consistent(0.0);
}

// A prior as tight as the data's own beta error: it counts as half a parameter's worth of
// information in p, and enters the meat as the model's.
TEST(HierarchicalSandwich, CountsAPriorAsTheModelsInformation) {
  expect_heteroskedasticity_consistent(0.05);
}

// Through the stage: the key is honoured, named in the result, and on a sample the model
// describes (Gaussian members, its own outlier law aside) the sandwich and the inverse
// Hessian agree to within their noise.
TEST(HierarchicalSandwich, TheFitStageReportsItWhenAskedAndItAgreesWhereTheModelHolds) {
  test::MockTruth truth;
  truth.sigma = 0.15;  // well above zero, so that it has an error
  const test::MockSample m = test::mock_parallax_sample(41, 400, 0.0, 2.0, 0.02, 0.05, truth);
  FitOptions o = test::mock_fit_options();
  o.space = FitSpace::kHierarchical;
  const FitResult hessian = run_fit(o, test::catalog_from_mock(m));
  o.hierarchical.covariance = CovarianceEstimate::kSandwich;
  const FitResult sandwich = run_fit(o, test::catalog_from_mock(m));
  const RelationResult& h = hessian.relations[0];
  const RelationResult& s = sandwich.relations[0];
  EXPECT_EQ(h.covariance_method, "hessian");
  EXPECT_EQ(s.covariance_method, "sandwich");
  const nlohmann::json j = sandwich.to_json(o);
  EXPECT_EQ(j["model"]["hierarchical"]["covariance"], "sandwich");
  EXPECT_EQ(j["relations"][0]["covariance_method"], "sandwich");
  // The estimates are the same fit's.
  EXPECT_EQ(h.parameter("alpha"), s.parameter("alpha"));
  for (const char* p : {"alpha", "beta", "parallax_offset_mas", "sigma_int"}) {
    const double ratio = s.error(p) / h.error(p);
    // 400 stars: a variance estimated from them is uncertain by ~sqrt(2 / 400) = 7%, its
    // square root by half that; 25% is several times the noise.
    EXPECT_NEAR(ratio, 1.0, 0.25) << p;
  }
}

// Outside the hierarchical space without a loss there is no sandwich to give: the fit says so.
TEST(HierarchicalSandwich, AskedForInAResidualSpaceWithoutALossItWarns) {
  const test::MockSample m = test::mock_parallax_sample(43, 150, 0.0);
  FitOptions o = test::mock_fit_options();
  o.space = FitSpace::kParallax;
  o.hierarchical.covariance = CovarianceEstimate::kSandwich;
  const FitResult r = run_fit(o, test::catalog_from_mock(m));
  EXPECT_EQ(r.relations[0].covariance_method, "hessian");
  bool warned = false;
  for (const auto& w : r.relations[0].warnings)
    warned = warned || w.find("applies to the hierarchical fit") != std::string::npos;
  EXPECT_TRUE(warned);
}

}  // namespace
}  // namespace rungcal
