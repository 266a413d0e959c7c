// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/calibration/apply*, grid_systematics and host_covariance, and of
// pipeline/rungcal-apply: distances of target Cepheids and their hosts, with statistical,
// calibration (every prior) and systematic errors apart, the chi2/dof scaling, outlier
// flags, the host-host covariance (against its analytic propagation and a Monte Carlo over
// the calibration), and bad input.
#include <gtest/gtest.h>

#include <array>
#include <cmath>
#include <iostream>
#include <limits>
#include <string>
#include <vector>

#include <fmt/format.h>
#include <Eigen/Dense>

#include "rungcal/calibration/apply.hpp"
#include "rungcal/calibration/apply_products.hpp"
#include "rungcal/calibration/grid_systematics.hpp"
#include "rungcal/calibration/host_covariance.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

struct Param {
  std::string name;
  double value = 0;
  std::string mode = "free";
  double prior_sigma = 0;  // > 0: a "prior" object {mean, sigma}
};

// A calibration of one relation "X" (pivot log P0 = 1) with these parameters; NaN in the
// covariance is written as null, as rungcal-fit writes what it could not determine.
Calibration make_calibration(const std::vector<Param>& params,
                             const std::vector<std::vector<double>>& cov) {
  nlohmann::json names = nlohmann::json::array(), ps = nlohmann::json::array(),
                 c = nlohmann::json::array();
  for (const auto& p : params) {
    names.push_back(p.name);
    nlohmann::json j = {{"name", p.name}, {"value", p.value}, {"mode", p.mode}};
    if (p.prior_sigma > 0) j["prior"] = {{"mean", p.value}, {"sigma", p.prior_sigma}};
    ps.push_back(j);
  }
  for (const auto& row : cov) {
    nlohmann::json r = nlohmann::json::array();
    for (double v : row)
      r.push_back(std::isfinite(v) ? nlohmann::json(v) : nlohmann::json(nullptr));
    c.push_back(r);
  }
  Calibration cal;
  cal.document = {{"name", "simple"}, {"version", 1}};
  cal.document["fit"]["relations"] = nlohmann::json::array({{{"name", "X"},
                                                             {"pivot_log_period", 1.0},
                                                             {"parameter_names", names},
                                                             {"parameters", ps},
                                                             {"covariance", c}}});
  return cal;
}

// alpha, beta, sigma_int with the given covariance.
Calibration simple_calibration(double alpha, double beta, double sigma,
                               const std::vector<std::vector<double>>& cov) {
  return make_calibration({{"alpha", alpha}, {"beta", beta}, {"sigma_int", sigma}}, cov);
}

struct Target {
  double log_period, m0, err, feh = kNaN;
  std::string host = "Far Galaxy";
};

StarTable target_table(const std::vector<Target>& rows) {
  StarTable t;
  for (const char* c : {"id", "group"}) t.add_column(c, ColumnType::kText);
  for (const char* c : {"log_period", "mag0_X", "mag0_err_X", "feh"})
    t.add_column(c, ColumnType::kReal);
  int i = 0;
  for (const auto& r : rows) {
    t.column("id").push_text("T" + std::to_string(i++));
    t.column("group").push_text(r.host);
    t.column("log_period").push_real(r.log_period);
    t.column("mag0_X").push_real(r.m0);
    t.column("mag0_err_X").push_real(r.err);
    t.column("feh").push_real(r.feh);
  }
  return t;
}

StarTable targets(const std::vector<std::array<double, 3>>& logp_m0_err,
                  const std::string& host = "Far Galaxy") {
  std::vector<Target> rows;
  for (const auto& r : logp_m0_err) rows.push_back({r[0], r[1], r[2], kNaN, host});
  return target_table(rows);
}

TEST(Apply, PhotometryEquationCheck) {
  // Common practice, no source: M = -4, m = 26, no extinction -> mu = 30, d = 10 Mpc.
  Calibration cal = simple_calibration(-4.0, 0.0, 0.0, {{0, 0, 0}, {0, 0, 0}, {0, 0, 0}});
  ApplyResult r = apply_calibration(cal, "X", targets({{1.3, 26.0, 0.05}}), ApplyOptions{});
  ASSERT_EQ(r.stars.size(), 1u);
  EXPECT_NEAR(r.stars[0].mu, 30.0, 1e-12);
  EXPECT_NEAR(r.stars[0].distance_pc, 1e7, 1e-3);
  EXPECT_NEAR(r.hosts[0].distance_mpc, 10.0, 1e-9);
}

TEST(Apply, ErrorsFollowTheAnalyticFormulas) {
  // Analytic derivation (linear propagation): per star var_cal = C_aa + x^2 C_bb + 2 x C_ab;
  // per host the statistical error 1/sqrt(sum 1/(e^2 + sigma_int^2)) and the calibration
  // error with the weighted-mean x. These stars agree (chi2/dof < 1): no scaling.
  const double caa = 0.0025, cbb = 0.0036, cab = -0.001, sig = 0.08;
  Calibration cal = simple_calibration(-5.8, -3.3, sig, {{caa, cab, 0}, {cab, cbb, 0}, {0, 0, 0}});
  std::vector<std::array<double, 3>> rows = {
      {1.2, 24.0, 0.05}, {1.5, 23.1, 0.10}, {1.8, 22.0, 0.07}};
  ApplyResult r = apply_calibration(cal, "X", targets(rows), ApplyOptions{});
  double sw = 0, swx = 0, swm = 0;
  for (std::size_t i = 0; i < rows.size(); ++i) {
    const double x = rows[i][0] - 1.0, m = -5.8 - 3.3 * x;
    EXPECT_NEAR(r.stars[i].mu, rows[i][1] - m, 1e-12);
    EXPECT_NEAR(r.stars[i].calibration_error, std::sqrt(caa + x * x * cbb + 2 * x * cab), 1e-12);
    const double var = rows[i][2] * rows[i][2] + sig * sig;
    EXPECT_NEAR(r.stars[i].stat_error, std::sqrt(var), 1e-12);
    EXPECT_EQ(r.stars[i].systematic_error, 0.0);  // no grid
    sw += 1 / var, swx += x / var, swm += (rows[i][1] - m) / var;
  }
  ASSERT_EQ(r.hosts.size(), 1u);
  const HostDistance& h = r.hosts[0];
  EXPECT_NEAR(h.mu, swm / sw, 1e-12);
  EXPECT_NEAR(h.stat_error_raw, 1 / std::sqrt(sw), 1e-12);
  ASSERT_LT(h.chi2_per_dof(), 1.0);
  EXPECT_EQ(h.error_scale, 1.0);
  EXPECT_NEAR(h.stat_error, 1 / std::sqrt(sw), 1e-12);
  const double xm = swx / sw;
  EXPECT_NEAR(h.calibration_error, std::sqrt(caa + xm * xm * cbb + 2 * xm * cab), 1e-12);
  EXPECT_NEAR(h.total_error(), std::hypot(h.stat_error, h.calibration_error), 1e-15);
}

TEST(Apply, AHostWhoseChi2PerDofExceedsOneHasItsStatisticalErrorScaled) {
  // Particle Data Group scale factor (Review of Particle Physics, Introduction; the Birge
  // ratio): S = sqrt(chi2 / (N - 1)), the error of the mean multiplied by S when S > 1.
  // Four stars of error 0.05 (sigma_int 0) at mu = 30.0, 30.2, 29.9, 30.3: mean 30.1,
  // chi2 = (0.01 + 0.01 + 0.04 + 0.04) / 0.0025 = 40, dof 3, S = sqrt(40/3) = 3.6515.
  Calibration cal = simple_calibration(-4.0, 0.0, 0.0, {{1e-4, 0, 0}, {0, 0, 0}, {0, 0, 0}});
  std::vector<std::array<double, 3>> rows = {
      {1.0, 26.0, 0.05}, {1.0, 26.2, 0.05}, {1.0, 25.9, 0.05}, {1.0, 26.3, 0.05}};
  ApplyOptions o;
  o.outlier_sigma = 10;  // keep every star: the scaling is the subject here
  ApplyResult r = apply_calibration(cal, "X", targets(rows), o);
  const HostDistance& h = r.hosts[0];
  EXPECT_NEAR(h.mu, 30.1, 1e-12);
  EXPECT_NEAR(h.chi2, 40.0, 1e-9);
  EXPECT_EQ(h.dof, 3);
  EXPECT_NEAR(h.chi2_per_dof(), 40.0 / 3.0, 1e-9);
  EXPECT_NEAR(h.error_scale, std::sqrt(40.0 / 3.0), 1e-9);
  EXPECT_NEAR(h.stat_error_raw, 0.05 / 2, 1e-12);  // raw figure kept: 1/sqrt(4 / 0.05^2)
  EXPECT_NEAR(h.stat_error, 0.025 * std::sqrt(40.0 / 3.0), 1e-9);
  EXPECT_NEAR(h.calibration_error, 0.01, 1e-12);  // a shared error: not scaled
  // The covariance product carries the scaled statistical variance.
  HostCovariance c = host_covariance(r);
  EXPECT_NEAR(c.statistical(0, 0), h.stat_error * h.stat_error, 1e-15);
  // One star: no degrees of freedom, no scaling, chi2/dof undefined (NaN in the products).
  ApplyResult one = apply_calibration(cal, "X", targets({{1.0, 26.0, 0.05}}), o);
  EXPECT_EQ(one.hosts[0].dof, 0);
  EXPECT_EQ(one.hosts[0].error_scale, 1.0);
  EXPECT_TRUE(std::isnan(one.hosts[0].chi2_per_dof()));
}

TEST(Apply, OutliersAreFlaggedAndLeftOut) {
  Calibration cal = simple_calibration(-5.0, -3.0, 0.05, {{0, 0, 0}, {0, 0, 0}, {0, 0, 0}});
  std::vector<std::array<double, 3>> rows;
  for (int i = 0; i < 20; ++i)
    rows.push_back({1.0 + 0.04 * i, 25.0 - 3.0 * 0.04 * i + 0.01 * ((i % 3) - 1), 0.05});
  rows.push_back({1.4, 25.0 - 1.2 - 1.0, 0.05});  // a blend, 1 mag too bright
  ApplyResult r = apply_calibration(cal, "X", targets(rows), ApplyOptions{});
  EXPECT_TRUE(r.stars.back().outlier);
  EXPECT_EQ(r.hosts[0].n_outliers, 1);
  EXPECT_NEAR(r.hosts[0].mu, 30.0, 0.01);
}

TEST(Apply, OutlierFlagsAreRecomputedOnEveryPass) {
  // Hand computation, errors 0.1, 3 sigma = 0.3 mag: nine stars at mu = 30.00, one at 29.75,
  // one at 31.50. Pass 1: mean of all 11 = 30.1136, so 29.75 (0.364 away) and 31.50 are
  // flagged. Pass 2: mean of the nine = 30.00, 29.75 is 0.25 away: it comes back. Pass 3:
  // mean of ten = 29.975; the flags repeat. A flag set once and never cleared kept it out.
  Calibration cal = simple_calibration(-4.0, 0.0, 0.0, {{0, 0, 0}, {0, 0, 0}, {0, 0, 0}});
  std::vector<std::array<double, 3>> rows(9, {1.0, 26.0, 0.1});
  rows.push_back({1.0, 25.75, 0.1});
  rows.push_back({1.0, 27.5, 0.1});
  ApplyResult r = apply_calibration(cal, "X", targets(rows), ApplyOptions{});
  EXPECT_FALSE(r.stars[9].outlier);
  EXPECT_TRUE(r.stars[10].outlier);
  EXPECT_EQ(r.hosts[0].n_outliers, 1);
  EXPECT_NEAR(r.hosts[0].mu, (9 * 30.0 + 29.75) / 10, 1e-12);
  // A run depends on nothing an earlier run flagged: a strict run, then the default again.
  ApplyOptions strict;
  strict.outlier_sigma = 2.0;  // 29.75 stays out: 0.25 from 30.00 is beyond 0.2
  EXPECT_EQ(apply_calibration(cal, "X", targets(rows), strict).hosts[0].n_outliers, 2);
  EXPECT_EQ(apply_calibration(cal, "X", targets(rows), ApplyOptions{}).hosts[0].n_outliers, 1);
}

TEST(Apply, TheCalibrationErrorKeepsEveryPrior) {
  // gamma undetermined by the fit (null covariance) but given a prior 0.1: its variance is
  // the prior's, 0.01; a fixed beta has none. Analytic: var = C_aa + feh^2 0.01.
  const std::vector<Param> params = {
      {"alpha", -5.0}, {"beta", -3.3, "fixed"}, {"gamma", -0.2, "prior", 0.1}, {"sigma_int", 0.0}};
  Calibration cal = make_calibration(
      params, {{0.0004, 0, kNaN, 0}, {0, 0, 0, 0}, {kNaN, 0, kNaN, kNaN}, {0, 0, kNaN, 0}});
  ParameterCovariance c = parameter_covariance(cal, "X");
  EXPECT_EQ(c.from_prior, (std::vector<bool>{false, false, true, false}));
  EXPECT_DOUBLE_EQ(c.matrix(2, 2), 0.01);
  ApplyResult r =
      apply_calibration(cal, "X", target_table({{1.3, 25.0, 0.05, -0.4}}), ApplyOptions{});
  EXPECT_NEAR(r.stars[0].calibration_error, std::sqrt(0.0004 + 0.16 * 0.01), 1e-12);
  // A parameter with a prior that the fit did determine keeps the fit's variance: the
  // prior is a term of the fit's -ln L, so its curvature is in the covariance already.
  Calibration determined =
      make_calibration(params, {{0.0004, 0, 0, 0}, {0, 0, 0, 0}, {0, 0, 0.0025, 0}, {0, 0, 0, 0}});
  EXPECT_DOUBLE_EQ(parameter_covariance(determined, "X").matrix(2, 2), 0.0025);
  // A free gamma without a variance: no honest error, so the prediction is refused.
  std::vector<Param> free_gamma = params;
  free_gamma[2] = {"gamma", -0.2};
  Calibration bare = make_calibration(
      free_gamma, {{0.0004, 0, kNaN, 0}, {0, 0, 0, 0}, {kNaN, 0, kNaN, kNaN}, {0, 0, kNaN, 0}});
  try {
    apply_calibration(bare, "X", target_table({{1.3, 25.0, 0.05, -0.4}}), ApplyOptions{});
    FAIL() << "a free parameter without a variance was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "undetermined_parameter");
    EXPECT_EQ(e.where().column, "gamma");
  }
  // ... unless no star needs it ([Fe/H] = 0 everywhere).
  EXPECT_NO_THROW(
      apply_calibration(bare, "X", target_table({{1.3, 25.0, 0.05, 0.0}}), ApplyOptions{}));
}

// Three hosts with different period and [Fe/H] mixes; alpha, beta, gamma correlated.
struct ThreeHosts {
  std::vector<Param> params = {
      {"alpha", -5.9}, {"beta", -3.3}, {"gamma", -0.2}, {"sigma_int", 0.07}};
  std::vector<std::vector<double>> cov = {{0.0009, -0.0006, 0.0004, 0},
                                          {-0.0006, 0.0025, -0.0003, 0},
                                          {0.0004, -0.0003, 0.0036, 0},
                                          {0, 0, 0, 0}};
  std::vector<Target> rows;
  ThreeHosts() {
    // Magnitudes on the relation at mu = 29, 30.5, 31.2, spread a little less than their
    // errors (chi2/dof < 1: the statistical part is not scaled).
    const std::array<std::string, 3> names = {"Host A", "Host B", "Host C"};
    const std::array<double, 3> mu = {29.0, 30.5, 31.2};
    for (int h = 0; h < 3; ++h)
      for (int i = 0; i < 8; ++i) {
        const double logp = 0.6 + 0.15 * i + 0.2 * h, feh = -0.3 + 0.15 * h + 0.02 * (i % 3);
        const double m = -5.9 - 3.3 * (logp - 1.0) - 0.2 * feh + mu[static_cast<std::size_t>(h)];
        rows.push_back({logp, m + 0.03 * ((i % 4) - 1.5) / 1.5, 0.06 + 0.01 * (i % 3), feh,
                        names[static_cast<std::size_t>(h)]});
      }
  }
};

TEST(Apply, HostCovarianceIsTheAnalyticPropagation) {
  // Analytic derivation (docs/method.md, "Distances from a calibration"; JCGM 102:2011, the
  // law of propagation for several outputs): mu_h = mbar_h - gbar_h . theta with
  // gbar_h = sum_i w_i (1, x_i, feh_i) / sum_i w_i, so Cov(mu_h, mu_k) = delta_hk / sum w +
  // gbar_h^T C gbar_k + sum_v (gbar_h . dtheta_v)(gbar_k . dtheta_v). Computed here by
  // explicit sums, independently of the library's.
  ThreeHosts s;
  Calibration cal = make_calibration(s.params, s.cov);
  SystematicShifts sys;
  sys.variants = {"v1", "v2"};
  sys.categories = {"a", "b"};
  sys.shift = {{0.02, -0.01, 0.05, 0.0}, {-0.015, 0.03, 0.0, 0.0}};
  ApplyResult r = apply_calibration(cal, "X", target_table(s.rows), ApplyOptions{}, sys);
  HostCovariance c = host_covariance(r);
  ASSERT_EQ(c.hosts, (std::vector<std::string>{"Host A", "Host B", "Host C"}));
  std::array<std::array<double, 3>, 3> gbar{};
  std::array<double, 3> sumw{};
  for (int h = 0; h < 3; ++h) {
    for (int i = 0; i < 8; ++i) {
      const Target& t = s.rows[static_cast<std::size_t>(8 * h + i)];
      const double w = 1 / (t.err * t.err + 0.07 * 0.07);
      sumw[h] += w;
      gbar[h][0] += w, gbar[h][1] += w * (t.log_period - 1.0), gbar[h][2] += w * t.feh;
    }
    for (double& g : gbar[h]) g /= sumw[h];
  }
  for (int a = 0; a < 3; ++a) {
    ASSERT_EQ(r.hosts[a].error_scale, 1.0) << c.hosts[a];
    for (int b = 0; b < 3; ++b) {
      double cal_ab = 0;
      for (int i = 0; i < 3; ++i)
        for (int j = 0; j < 3; ++j) cal_ab += gbar[a][i] * s.cov[i][j] * gbar[b][j];
      double sys_ab = 0;
      for (const auto& v : sys.shift) {
        const double da = -(gbar[a][0] * v[0] + gbar[a][1] * v[1] + gbar[a][2] * v[2]);
        const double db = -(gbar[b][0] * v[0] + gbar[b][1] * v[1] + gbar[b][2] * v[2]);
        sys_ab += da * db;
      }
      EXPECT_NEAR(c.calibration(a, b), cal_ab, 1e-15) << a << "," << b;
      EXPECT_NEAR(c.systematic(a, b), sys_ab, 1e-15) << a << "," << b;
      EXPECT_NEAR(c.statistical(a, b), a == b ? 1 / sumw[a] : 0.0, 1e-15) << a << "," << b;
    }
    // The diagonal is each host's own three errors.
    EXPECT_NEAR(c.calibration(a, a), std::pow(r.hosts[a].calibration_error, 2), 1e-15);
    EXPECT_NEAR(c.systematic(a, a), std::pow(r.hosts[a].systematic_error, 2), 1e-15);
    EXPECT_NEAR(c.total()(a, a), std::pow(r.hosts[a].total_error(), 2), 1e-14);
  }
  // Hosts that share a calibration are correlated: every off-diagonal term here is > 0.2.
  const Eigen::MatrixXd v = c.total();
  for (int a = 0; a < 3; ++a)
    for (int b = 0; b < a; ++b) EXPECT_GT(v(a, b) / std::sqrt(v(a, a) * v(b, b)), 0.2);
  // The product is that matrix, row-major.
  StarTable t = host_covariance_table(c);
  ASSERT_EQ(t.rows(), 9u);
  EXPECT_EQ(t.column("host_a").text[5], "Host B");
  EXPECT_EQ(t.column("host_b").text[5], "Host C");
  EXPECT_DOUBLE_EQ(t.column("cov_total").real[5], v(1, 2));
  EXPECT_DOUBLE_EQ(t.column("cov_cal").real[7], c.calibration(2, 1));
}

TEST(Apply, HostCovarianceMatchesAMonteCarloOverCalibrationDraws) {
  // Monte Carlo: theta drawn from N(theta_hat, C) (Cholesky factor L, theta = theta_hat +
  // L z), each star's magnitude from N(m_i, e_i^2 + sigma_int^2); every draw reruns apply.
  // The sample covariance of the host moduli must match V_stat + V_cal within 4 standard
  // errors of a sample covariance, sqrt((V_aa V_bb + V_ab^2) / N) (normal theory).
  ThreeHosts s;
  const Calibration nominal = make_calibration(s.params, s.cov);
  ApplyOptions o;
  o.outlier_sigma = 1e6;  // no flags: the subject is the propagation
  const ApplyResult r0 = apply_calibration(nominal, "X", target_table(s.rows), o);
  const HostCovariance c = host_covariance(r0);
  Eigen::MatrixXd expected = c.calibration;
  for (int a = 0; a < 3; ++a) expected(a, a) += std::pow(r0.hosts[a].stat_error_raw, 2);
  Eigen::Matrix3d cov3;
  for (int i = 0; i < 3; ++i)
    for (int j = 0; j < 3; ++j) cov3(i, j) = s.cov[i][j];
  const Eigen::Matrix3d l = cov3.llt().matrixL();
  Random rng(20261202);
  const int n = 4000;
  Eigen::MatrixXd draws(n, 3);
  for (int k = 0; k < n; ++k) {
    const Eigen::Vector3d z(rng.normal(), rng.normal(), rng.normal());
    const Eigen::Vector3d theta = Eigen::Vector3d(-5.9, -3.3, -0.2) + l * z;
    std::vector<Param> p = s.params;
    for (int j = 0; j < 3; ++j) p[j].value = theta(j);
    std::vector<Target> rows = s.rows;
    for (auto& t : rows) t.m0 += rng.normal(0.0, std::hypot(t.err, 0.07));
    const ApplyResult r = apply_calibration(make_calibration(p, s.cov), "X", target_table(rows), o);
    for (int a = 0; a < 3; ++a) draws(k, a) = r.hosts[a].mu;
  }
  const Eigen::RowVectorXd mean = draws.colwise().mean();
  const Eigen::MatrixXd centred = draws.rowwise() - mean;
  const Eigen::MatrixXd sample = centred.transpose() * centred / (n - 1);
  for (int a = 0; a < 3; ++a) {
    EXPECT_NEAR(mean(a), r0.hosts[a].mu, 4 * std::sqrt(expected(a, a) / n));
    for (int b = 0; b < 3; ++b) {
      const double se =
          std::sqrt((expected(a, a) * expected(b, b) + expected(a, b) * expected(a, b)) / n);
      EXPECT_NEAR(sample(a, b), expected(a, b), 4 * se) << a << "," << b;
    }
  }
  std::cout << "[ Monte Carlo ] sample covariance\n"
            << sample << "\n[ analytic ]\n"
            << expected << "\n";
}

TEST(Apply, SystematicsComeFromTheGridBudget) {
  // A budget in rungcal-grid's format: variant "law" shifts alpha by 0.03 and beta by -0.02;
  // variant "no_feh" drops the metallicity term (no gamma row: gamma's shift is -gamma) and
  // shifts alpha by -0.01. For a star at x = log P - 1 = 0.5, [Fe/H] = -0.4, by hand:
  // delta_law = -(0.03 - 0.02 * 0.5) = -0.02, delta_no_feh = -(-0.01 + 0.2 * -0.4) = 0.09,
  // sigma_sys = sqrt(0.02^2 + 0.09^2).
  Calibration cal =
      make_calibration({{"alpha", -5.0}, {"beta", -3.3}, {"gamma", -0.2}, {"sigma_int", 0.0}},
                       {{1e-4, 0, 0, 0}, {0, 1e-4, 0, 0}, {0, 0, 1e-4, 0}, {0, 0, 0, 0}});
  nlohmann::json budget = nlohmann::json::parse(R"({
    "schema": "rungcal-error-budget", "schema_version": 1,
    "variants": [{"name": "law", "category": "extinction"}, {"name": "no_feh", "category": "metallicity"}],
    "relations": [{"name": "X", "parameters": [
      {"name": "alpha", "baseline": -5.0, "baseline_error": 0.01,
       "variants": [{"variant": "law", "category": "extinction", "shift": 0.03},
                    {"variant": "no_feh", "category": "metallicity", "shift": -0.01}]},
      {"name": "beta", "baseline": -3.3, "baseline_error": 0.01,
       "variants": [{"variant": "law", "category": "extinction", "shift": -0.02},
                    {"variant": "no_feh", "category": "metallicity", "shift": 0.0}]},
      {"name": "gamma", "baseline": -0.2, "baseline_error": 0.01,
       "variants": [{"variant": "law", "category": "extinction", "shift": 0.0}]}]}]})");
  SystematicShifts sys = systematic_shifts(budget, "grid.json", cal, "X");
  EXPECT_EQ(sys.variants, (std::vector<std::string>{"law", "no_feh"}));
  EXPECT_EQ(sys.shift[1], (std::vector<double>{-0.01, 0.0, 0.2, 0.0}));
  ApplyResult r =
      apply_calibration(cal, "X", target_table({{1.5, 25.0, 0.05, -0.4}}), ApplyOptions{}, sys);
  EXPECT_NEAR(r.stars[0].systematic_error, std::hypot(0.02, 0.09), 1e-12);
  EXPECT_NEAR(r.hosts[0].systematic_shifts[0], -0.02, 1e-12);
  EXPECT_NEAR(r.hosts[0].systematic_shifts[1], 0.09, 1e-12);
  // A variant that changes the extinction law moves the targets too: flagged, and its
  // category can be left out, leaving delta_no_feh alone.
  nlohmann::json marked = budget;
  marked["variants"][0]["changes_extinction"] = true;
  SystematicShifts kept = systematic_shifts(marked, "grid.json", cal, "X");
  EXPECT_EQ(kept.changes_extinction, (std::vector<bool>{true, false}));
  SystematicShifts skipped = kept.without_categories({"extinction"}, "grid_skip_categories");
  EXPECT_EQ(skipped.variants, std::vector<std::string>{"no_feh"});
  ApplyResult r2 =
      apply_calibration(cal, "X", target_table({{1.5, 25.0, 0.05, -0.4}}), ApplyOptions{}, skipped);
  EXPECT_NEAR(r2.hosts[0].systematic_error, 0.09, 1e-12);
  try {
    kept.without_categories({"optics"}, "grid_skip_categories");
    FAIL() << "an unknown category was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "unknown_category");
    EXPECT_EQ(e.where().column, "grid_skip_categories");
  }
  // Bad budgets name the file, the key and the rule.
  auto rule_of = [&](const nlohmann::json& doc, const std::string& relation) {
    try {
      systematic_shifts(doc, "grid.json", cal, relation);
    } catch (const InputError& e) {
      EXPECT_EQ(e.where().file, "grid.json");
      return e.rule() + " " + e.where().column;
    }
    return std::string("accepted");
  };
  EXPECT_EQ(rule_of(budget, "Y"), "unknown_relation relations");
  nlohmann::json other = budget;
  other["schema"] = "rungcal-fit";
  EXPECT_EQ(rule_of(other, "X"), "budget_schema schema");
  other = budget;
  other["relations"][0]["parameters"][0]["variants"][1]["shift"] = "large";
  EXPECT_EQ(rule_of(other, "X"), "budget_schema relations[0].parameters[0].variants[1].shift");
  other = budget;
  other["relations"][0]["parameters"][1]["variants"][0]["variant"] = "rv_9";
  EXPECT_EQ(rule_of(other, "X"), "budget_schema relations[0].parameters[1].variants[0].variant");
  other = budget;
  other.erase("variants");
  EXPECT_EQ(rule_of(other, "X"), "budget_schema variants");
}

TEST(Apply, BadTargetRowsNameTheFileRowColumnAndRule) {
  Calibration cal =
      make_calibration({{"alpha", -5.0}, {"beta", -3.3}, {"gamma", -0.2}, {"sigma_int", 0.05}},
                       {{1e-4, 0, 0, 0}, {0, 1e-4, 0, 0}, {0, 0, 1e-4, 0}, {0, 0, 0, 0}});
  ApplyOptions o;
  o.targets_path = "targets.fits";
  auto failure = [&](const std::vector<Target>& rows) {
    try {
      apply_calibration(cal, "X", target_table(rows), o);
    } catch (const InputError& e) {
      EXPECT_EQ(e.where().file, "targets.fits");
      return fmt::format("{} row {} {}", e.rule(), e.where().row.value_or(-1), e.where().column);
    }
    return std::string("accepted");
  };
  const Target good{1.2, 25.0, 0.05, -0.1};
  EXPECT_EQ(failure({good, {1.2, 25.0, -0.05, -0.1}}), "bad_error row 2 mag0_err_X");
  EXPECT_EQ(failure({good, good, {1.2, 25.0, kNaN, -0.1}}), "bad_error row 3 mag0_err_X");
  EXPECT_EQ(failure({{kNaN, 25.0, 0.05, -0.1}}), "bad_value row 1 log_period");
  EXPECT_EQ(failure({good, {1.2, 25.0, 0.05, kNaN}}), "missing_value row 2 feh");
  // A row without the magnitude is not bad: the target lacks this band and is left out.
  EXPECT_EQ(failure({good, {1.2, kNaN, kNaN, kNaN}}), "accepted");
  StarTable twice = target_table({good, good});
  twice.column("id").text[1] = "T0";
  try {
    apply_calibration(cal, "X", twice, o);
    FAIL() << "a repeated id was accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "duplicate_id");
    EXPECT_EQ(e.where().row.value_or(-1), 2);
  }
}

TEST(Apply, TheSimulatedTargetGalaxyIsAtItsTrueDistance) {
  // The demo scenario end to end: calibrators -> ingest -> deredden -> fit (W_VI) -> publish;
  // targets -> ingest -> deredden -> apply. Simulated truth: mu = 29.35 (sample_data/truth.json).
  test::TempDir dir;
  auto run = [&](const std::string& stage, const std::string& args) {
    auto r = test::run_stage(stage, args);
    ASSERT_EQ(r.exit_code, 0) << stage << ": " << r.output;
  };
  const std::string cfg = test::source_file("config/demo/");
  run("ingest", "--config " + cfg + "ingest.toml --out " + dir.file("cat.fits"));
  run("deredden", "--config " + cfg + "deredden.toml --input " + dir.file("cat.fits") + " --out " +
                      dir.file("dered.fits"));
  test::write_text(dir.file("fit.toml"),
                   "[fit]\ninput = \"dered.fits\"\noutput = \"fit.json\"\n"
                   "zero_point = \"constant\"\nzero_point_mas = -0.020\nmax_ruwe = 1.4\n"
                   "[[relation]]\nband = \"W_VI\"\nmetallicity = true\n");
  run("fit", "--config " + dir.file("fit.toml"));
  run("publish", "--store " + dir.file("store") + " --name halden --fit " + dir.file("fit.json"));
  run("ingest", "--config " + cfg + "ingest_targets.toml --out " + dir.file("targets.fits"));
  run("deredden", "--config " + cfg + "deredden_targets.toml --input " + dir.file("targets.fits") +
                      " --out " + dir.file("tdered.fits"));
  const std::string common =
      "--store " + dir.file("store") + " --calibration halden@latest --relation W_VI --targets ";
  auto r = test::run_stage(
      "apply", common + dir.file("tdered.fits") + " --out " + dir.file("distances.fits"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  SourceTable hosts = read_fits_table(dir.file("distances.fits"), {"HOSTS", 0});
  ASSERT_EQ(hosts.table.rows(), 1u);
  EXPECT_EQ(hosts.table.column("host").text[0], "Veyra Spiral");
  const double mu = hosts.table.column("mu").real[0];
  const double err = hosts.table.column("mu_err").real[0];
  EXPECT_NEAR(err,
              std::hypot(hosts.table.column("mu_stat_err").real[0],
                         hosts.table.column("mu_cal_err").real[0]),
              1e-12)
      << "no grid: no systematic term";
  EXPECT_NEAR(mu, 29.35, 2 * err);
  EXPECT_EQ(std::get<std::string>(hosts.table.keyword("RGCALIB")->value), "halden@1");
  // The raw statistical error is kept beside the scaled one.
  EXPECT_NEAR(
      hosts.table.column("mu_stat_err").real[0],
      hosts.table.column("mu_stat_err_raw").real[0] * hosts.table.column("error_scale").real[0],
      1e-12);
  // The covariance product: one host, its variance the total error squared, in FITS and CSV.
  SourceTable cov = read_fits_table(dir.file("distances.fits"), {"HOST_COVARIANCE", 0});
  ASSERT_EQ(cov.table.rows(), 1u);
  EXPECT_NEAR(cov.table.column("cov_total").real[0], err * err, 1e-12);
  EXPECT_EQ(cov.table.column("cov_total").unit, "mag2");
  const ApplyProductPaths paths = apply_product_paths([&] {
    ApplyOptions o;
    o.output_path = dir.file("distances.fits");
    return o;
  }());
  for (const auto& p : paths.all()) EXPECT_TRUE(test::file_exists(p)) << p;
  EXPECT_NE(test::read_text(paths.covariance_csv)
                .find("host_a,host_b,index_a,index_b,cov_stat,cov_cal,cov_sys,cov_total"),
            std::string::npos);
  std::cout << "[ Veyra Spiral ] mu = " << mu << " +- " << err << " (truth 29.35)\n";

  // Bad input: exit 2, the message names the file, row, column and rule; nothing is written.
  SourceTable t = read_fits_table(dir.file("tdered.fits"), {"CATALOG", 0});
  ASSERT_GE(t.table.rows(), 3u);
  t.table.column("mag0_err_W_VI").real[2] = -0.02;
  write_fits_tables(dir.file("bad.fits"), {{"CATALOG", &t.table}});
  r = test::run_stage("apply",
                      common + dir.file("bad.fits") + " --out " + dir.file("bad_out/d.fits"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find(dir.file("bad.fits") + ":row 3: column 'mag0_err_W_VI': [bad_error]"),
            std::string::npos)
      << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("bad_out/d.fits")));
}

}  // namespace
}  // namespace rungcal
