// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/simulate: determinism for a seed, and the truth file describing what
// was drawn (simulation tests with known truth).
#include <gtest/gtest.h>

#include <cmath>

#include "rungcal/photometry/photometry.hpp"
#include "rungcal/simulate/simulate.hpp"
#include "rungcal/table/text_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

SimulateOptions demo_options() {
  return simulate_options_from_file(test::source_file("config/simulate_demo.toml"));
}

BandTable demo_bands() { return BandTable::from_file(test::source_file("config/bands.toml")); }

TEST(Simulate, SameSeedSameDrawOtherSeedOtherDraw) {
  SimulateOptions o = demo_options();
  o.n_calibrators = 50;
  o.n_lightcurve_stars = 5;
  BandTable b = demo_bands();
  Simulation a = simulate(o, b), c = simulate(o, b);
  EXPECT_EQ(format_csv_table(a.calibrators), format_csv_table(c.calibrators));
  EXPECT_EQ(format_csv_table(a.light_curves), format_csv_table(c.light_curves));
  EXPECT_EQ(a.truth.dump(), c.truth.dump());
  o.seed += 1;
  EXPECT_NE(format_csv_table(simulate(o, b).calibrators), format_csv_table(a.calibrators));
}

TEST(Simulate, SampleDataIsWhatTheDemoConfigDraws) {
  // sample_data/ is checked in; it must be reproducible from config/simulate_demo.toml.
  SimulateOptions o = demo_options();
  Simulation s = simulate(o, demo_bands());
  EXPECT_EQ(format_csv_table(s.light_curves),
            test::read_text(test::source_file("sample_data/lightcurves.csv")));
  EXPECT_EQ(format_csv_table(s.targets),
            test::read_text(test::source_file("sample_data/targets.csv")));
  EXPECT_EQ(s.truth.dump(2) + "\n", test::read_text(test::source_file("sample_data/truth.json")));
}

TEST(Simulate, TruthFileMatchesTheDraws) {
  SimulateOptions o = demo_options();
  o.n_calibrators = 3000;
  o.n_lightcurve_stars = 0;
  o.outlier_fraction = 0.0;
  o.clusters.clear();  // field stars only: the checks below are of the field's draws
  o.anchors.clear();
  Simulation s = simulate(o, demo_bands());
  const StarTable &cat = s.calibrators, &truth = s.truth_stars;
  ASSERT_EQ(cat.rows(), 3000u);
  const double n = 3000.0;
  const std::size_t rows = cat.rows();
  // Magnitudes: m - (M + mu + R E(B-V)) is the photometric noise, N(0, mag_error).
  double rk = s.truth["relations"]["Ks"]["a_over_ebv"].get<double>();
  double sum = 0, sum2 = 0;
  for (std::size_t i = 0; i < rows; ++i) {
    double d = cat.column("Ks_MEAN").real[i] -
               (truth.column("M_Ks").real[i] + truth.column("mu_true").real[i] +
                rk * truth.column("ebv_true").real[i]);
    sum += d;
    sum2 += d * d;
  }
  double mean = sum / n, sd = std::sqrt(sum2 / n - mean * mean);
  EXPECT_NEAR(mean, 0.0, 4 * o.mag_error / std::sqrt(n));
  EXPECT_NEAR(sd, o.mag_error,
              0.1 * o.mag_error);  // published rounding to 1e-4 adds nothing visible
  // Parallaxes: observed - true has mean zero point + offset (weighted by 1/sigma^2).
  double wsum = 0, wres = 0;
  for (std::size_t i = 0; i < rows; ++i) {
    if (cat.column("RUWE").real[i] > 1.4) continue;  // the simulated binaries have inflated noise
    double w = 1.0 / std::pow(cat.column("PLX_ERR").real[i], 2);
    wsum += w;
    wres += w * (cat.column("PLX").real[i] - truth.column("parallax_true_mas").real[i]);
  }
  EXPECT_NEAR(wres / wsum, o.parallax_zero_point_mas + o.parallax_offset_mas,
              4.0 / std::sqrt(wsum));
  // Periods: first-overtone periods fundamentalize to the true log period.
  for (std::size_t i = 0; i < rows; ++i) {
    double p = cat.column("PERIOD").real[i];
    double pf = cat.column("MODE").text[i] == "1O" ? fundamentalized_period(p) : p;
    ASSERT_NEAR(std::log10(pf), truth.column("log_period_fundamental").real[i], 1e-6);
  }
  // The Wesenheit truth: a least-squares line through the true W_VI absolute magnitudes
  // recovers the truth file's slope and zero point (gamma [Fe/H] included).
  double r = s.truth["wesenheit"]["W_VI"]["r_reddening_free"].get<double>();
  double alpha = s.truth["wesenheit"]["W_VI"]["alpha"].get<double>(),
         beta = s.truth["wesenheit"]["W_VI"]["beta"].get<double>();
  double gamma = s.truth["wesenheit"]["W_VI"]["gamma"].get<double>(),
         scatter = s.truth["wesenheit"]["W_VI"]["scatter"].get<double>();
  double sx = 0, sy = 0, sxx = 0, sxy = 0;
  for (std::size_t i = 0; i < rows; ++i) {
    double x = truth.column("log_period_fundamental").real[i] - 1.0;
    double y = truth.column("M_I").real[i] -
               r * (truth.column("M_V").real[i] - truth.column("M_I").real[i]) -
               gamma * truth.column("feh_true").real[i];
    sx += x, sy += y, sxx += x * x, sxy += x * y;
  }
  double slope = (n * sxy - sx * sy) / (n * sxx - sx * sx), icpt = (sy - slope * sx) / n;
  EXPECT_NEAR(slope, beta, 4 * scatter / std::sqrt(sxx - sx * sx / n));
  EXPECT_NEAR(icpt, alpha, 8 * scatter / std::sqrt(n));
}

// Anchor galaxies: their Cepheids at the true modulus with the galaxy's reddening, in GROUP;
// the published moduli scatter about the truth with the configured errors and correlation
// (400 draws of the demo's two anchors: the sample correlation's error is about
// (1 - rho^2) / sqrt(400) = 0.03).
TEST(Simulate, AnchorGalaxiesAndTheirCorrelatedPublishedModuli) {
  SimulateOptions o = demo_options();
  ASSERT_EQ(o.anchors.size(), 2u);
  o.n_calibrators = 3, o.n_lightcurve_stars = 0, o.n_targets = 3, o.release2_error_factor = 0;
  o.clusters.clear();
  const BandTable bands = demo_bands();
  const Simulation one = simulate(o, bands);
  const StarTable& cat = one.calibrators;
  ASSERT_EQ(cat.rows(), 3u + 24u + 14u);
  for (std::size_t i = 3; i < cat.rows(); ++i) {
    const std::string& group = cat.column("GROUP").text[i];
    const SimulatedAnchor& a = group == o.anchors[0].name ? o.anchors[0] : o.anchors[1];
    EXPECT_EQ(group, a.name);
    EXPECT_NEAR(one.truth_stars.column("mu_true").real[i], a.mu, 1e-9);
    EXPECT_LT(one.truth_stars.column("ebv_true").real[i], 5 * a.ebv);
  }
  ASSERT_EQ(one.truth["anchor_covariance"].size(), 2u);
  EXPECT_NEAR(one.truth["anchor_covariance"][0][1].get<double>(), 0.6 * 0.026 * 0.033, 1e-12);
  double s00 = 0, s11 = 0, s01 = 0;
  const int draws = 400;
  for (int k = 0; k < draws; ++k) {
    o.seed = 1000 + static_cast<std::uint64_t>(k);
    o.anchors[0].members = o.anchors[1].members = 1;
    const nlohmann::json t = simulate(o, bands).truth["anchors"];
    const double e0 = (t[0]["mu"].get<double>() - t[0]["mu_true"].get<double>()) / 0.026;
    const double e1 = (t[1]["mu"].get<double>() - t[1]["mu_true"].get<double>()) / 0.033;
    s00 += e0 * e0, s11 += e1 * e1, s01 += e0 * e1;
  }
  EXPECT_NEAR(std::sqrt(s00 / draws), 1.0, 0.15);  // unit errors: sd of an sd ~ 1/sqrt(2n)
  EXPECT_NEAR(std::sqrt(s11 / draws), 1.0, 0.15);
  EXPECT_NEAR(s01 / std::sqrt(s00 * s11), 0.6, 0.13);
  o.anchor_correlation = 1.0;
  EXPECT_NE(o.check().find("anchor_correlation"), std::string::npos);
}

TEST(Simulate, BadConfigNamesTheKey) {
  test::TempDir dir;
  test::write_text(dir.file("s.toml"),
                   "[simulate]\nseed = 1\nn_calibrators = 2\n[[relation]]\nband = \"V\"\n");
  auto r = test::run_stage("simulate", "--config " + dir.file("s.toml"));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("n_calibrators"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace rungcal
