// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/lightcurve: periodograms against astropy.timeseries.LombScargle
// (Debian python3-astropy), the intensity mean against the analytic Bessel-function value,
// and period and light-curve recovery on simulated curves with known truth.
#include <gtest/gtest.h>

#include <fmt/format.h>

#include <cmath>
#include <fstream>
#include <functional>
#include <limits>
#include <map>
#include <numbers>
#include <ostream>
#include <set>
#include <sstream>

#include "mock_lightcurves.hpp"
#include "rungcal/lightcurve/fourier.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"
#include "rungcal/lightcurve/periodogram.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

std::string series_csv(const TimeSeries& s) {
  std::ostringstream out;
  out.precision(17);
  for (std::size_t i = 0; i < s.size(); ++i)
    out << s.t[i] << "," << s.y[i] << "," << s.dy[i] << "\n";
  return out.str();
}

TimeSeries uneven_series(std::uint64_t seed, int n, double error_lo = 0.01,
                         double error_hi = 0.05) {
  Random rng(seed);
  test::MockCurve c;
  c.period_d = 7.3;
  TimeSeries s;
  for (double t : test::mock_epochs(rng, n)) {
    double e = rng.uniform(error_lo, error_hi);
    s.t.push_back(t);
    s.y.push_back(c.magnitude(t) + rng.normal(0, e));
    s.dy.push_back(e);
  }
  return s;
}

// Astropy's exact evaluators: method "cython" for one term, "chi2" for several (its "fast"
// methods are approximations and are not the reference here).
std::vector<double> astropy_power(const TimeSeries& s, const FrequencyGrid& g, int nterms,
                                  test::TempDir& dir) {
  test::write_text(dir.file("series.csv"), series_csv(s));
  auto r = test::run_python(
      R"(
import sys, numpy as np
from astropy.timeseries import LombScargle
t, y, dy = np.loadtxt(sys.argv[1], delimiter=",", unpack=True)
f = float(sys.argv[2]) + float(sys.argv[3]) * np.arange(int(sys.argv[4]))
nterms = int(sys.argv[5])
ls = LombScargle(t, y, dy, fit_mean=True, center_data=True, nterms=nterms, normalization="standard")
p = ls.power(f, method="cython" if nterms == 1 else "chi2")
print("\n".join(repr(float(x)) for x in p))
)",
      {dir.file("series.csv"), fmt::format("{:.17g}", g.first), fmt::format("{:.17g}", g.step),
       std::to_string(g.count), std::to_string(nterms)});
  EXPECT_EQ(r.exit_code, 0) << r.output;
  return test::parse_numbers(r.output);
}

TEST(Periodogram, LombScargleEqualsAstropyStandardFloatingMeanTo1e6) {
  // Reference: astropy.timeseries.LombScargle (python3-astropy), normalization "standard",
  // fit_mean=True, same frequency grid; 80 uneven epochs with unequal errors.
  test::TempDir dir;
  TimeSeries s = uneven_series(11, 80);
  FrequencyGrid g = frequency_grid(s.t.back() - s.t.front(), 1.0, 100.0, 5.0);
  std::vector<double> mine = lomb_scargle_power(s, g);
  std::vector<double> ref = astropy_power(s, g, 1, dir);
  ASSERT_EQ(ref.size(), mine.size());
  double worst = 0;
  for (std::size_t k = 0; k < mine.size(); ++k) worst = std::max(worst, std::abs(mine[k] - ref[k]));
  EXPECT_LT(worst, 1e-6);
  // And the grid's last stretch, furthest from the recurrence's seed, is as good.
  EXPECT_NEAR(mine.back(), ref.back(), 1e-9);
}

TEST(Periodogram, ThreeHarmonicPowerEqualsAstropyNterms3To1e6) {
  // Reference: astropy LombScargle(nterms=3), standard normalisation, method "chi2".
  test::TempDir dir;
  TimeSeries s = uneven_series(12, 60);
  FrequencyGrid g = frequency_grid(s.t.back() - s.t.front(), 1.5, 60.0, 3.0);
  std::vector<double> mine = multiband_power({s}, g, 3);
  std::vector<double> ref = astropy_power(s, g, 3, dir);
  ASSERT_EQ(ref.size(), mine.size());
  double worst = 0;
  for (std::size_t k = 0; k < mine.size(); ++k) worst = std::max(worst, std::abs(mine[k] - ref[k]));
  EXPECT_LT(worst, 1e-6);
}

TEST(Periodogram, OneBandOneHarmonicMultibandIsLombScargle) {
  TimeSeries s = uneven_series(13, 50);
  FrequencyGrid g = frequency_grid(1200, 2.0, 50.0, 5.0);
  std::vector<double> a = lomb_scargle_power(s, g), b = multiband_power({s}, g, 1);
  for (std::size_t k = 0; k < a.size(); k += 97) EXPECT_NEAR(a[k], b[k], 1e-12);
}

TEST(Periodogram, FalseAlarmProbabilityEqualsAstropyBaluev) {
  // Reference: astropy's Baluev approximation, the function LombScargle.false_alarm_probability
  // calls (that method would first move f_max onto its own frequency grid).
  test::TempDir dir;
  TimeSeries s = uneven_series(14, 40, 0.2, 0.4);  // noisy: probabilities away from 0 and 1
  test::write_text(dir.file("series.csv"), series_csv(s));
  const double fmax = 1.0;
  auto r = test::run_python(R"(
import sys, numpy as np
from astropy.timeseries.periodograms.lombscargle import _statistics
t, y, dy = np.loadtxt(sys.argv[1], delimiter=",", unpack=True)
for z in (0.2, 0.35, 0.5, 0.7):
    print(repr(float(_statistics.false_alarm_probability(z, 1.0, t, y, dy, "standard", method="baluev"))))
)",
                            {dir.file("series.csv")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  std::vector<double> ref = test::parse_numbers(r.output);
  ASSERT_EQ(ref.size(), 4u);
  const double z[] = {0.2, 0.35, 0.5, 0.7};
  for (int i = 0; i < 4; ++i)
    EXPECT_NEAR(false_alarm_probability(z[i], s, fmax), ref[static_cast<std::size_t>(i)],
                1e-9 + 1e-6 * ref[static_cast<std::size_t>(i)]);
}

TEST(IntensityMean, PureSinusoidEqualsBesselValue) {
  // <m> - m0 = -2.5 log10 I0(0.921034 A) for m = m0 + A sin(2 pi phi); the method brief's
  // values: -0.002301 (A = 0.1), -0.056819 (A = 0.5), -0.219088 (A = 1.0).
  const double amplitude[] = {0.1, 0.5, 1.0};
  const double expected[] = {-0.002301, -0.056819, -0.219088};
  for (int i = 0; i < 3; ++i) {
    EXPECT_NEAR(sinusoid_intensity_offset(amplitude[i]), expected[i], 5e-7);
    FourierCurve c;
    c.order = 1;
    c.coefficients = Eigen::Vector3d(15.0, 0.0, amplitude[i]);
    c.covariance = Eigen::Matrix3d::Identity() * 1e-6;
    CurveMeasures m = measure_curve(c, 0.1, 0.0);
    EXPECT_NEAR(m.intensity_mean - 15.0, sinusoid_intensity_offset(amplitude[i]), 1e-6);
    EXPECT_NEAR(m.amplitude, 2 * amplitude[i], 1e-8);
  }
}

TEST(Fourier, RecoversAKnownThreeHarmonicCurve) {
  // Known input (sine series): A1 0.30, R21 0.40, R31 0.1667, phi21 = 2.0 - 0.8, phi31 =
  // 4.1 - 1.2 (mod 2 pi); 300 epochs at 5 mmag. Each Fourier parameter within 4 sigma of
  // the input, and the intensity mean against a dense numerical integral of the input.
  Random rng(21);
  test::MockCurve c;
  c.period_d = 5.37;
  TimeSeries s = test::mock_series(c, test::mock_epochs(rng, 300), 0.005, rng);
  const double f_true = 1.0 / c.period_d;
  LightCurveFit fit = refine_light_curve({s}, {3}, f_true * (1 + 2e-5), 2460300.0);
  ASSERT_TRUE(fit.converged) << fit.message;
  EXPECT_NEAR(fit.frequency, f_true, 4 * fit.frequency_err);
  CurveMeasures m = measure_curve(fit.bands[0], fit.frequency, fit.t_ref);
  const double two_pi = 2 * std::numbers::pi;
  auto wrap = [&](double a) { return a - two_pi * std::floor(a / two_pi); };
  EXPECT_NEAR(m.r21, 0.12 / 0.30, 4 * m.r21_err);
  EXPECT_NEAR(m.r31, 0.05 / 0.30, 4 * m.r31_err);
  EXPECT_NEAR(m.phi21, wrap(2.0 - 2 * 0.4), 4 * m.phi21_err);
  EXPECT_NEAR(m.phi31, wrap(4.1 - 3 * 0.4), 4 * m.phi31_err);
  double flux = 0;
  const int steps = 20000;
  for (int i = 0; i < steps; ++i)
    flux += std::pow(10.0, -0.4 * c.magnitude(c.t0 + c.period_d * (i + 0.5) / steps));
  const double intensity_truth = -2.5 * std::log10(flux / steps);
  EXPECT_NEAR(m.intensity_mean, intensity_truth, 4 * m.intensity_mean_err);
  EXPECT_LT(m.intensity_mean_err, 0.002);
}

TEST(Fourier, BicPicksTheInputOrder) {
  Random rng(22);
  test::MockCurve c;  // three harmonics
  TimeSeries s = test::mock_series(c, test::mock_epochs(rng, 200), 0.005, rng);
  EXPECT_EQ(order_by_bic(s, 1.0 / c.period_d, 2460300.0, 8, 3), 3);
}

LightCurveOptions mock_options() {
  LightCurveOptions o;
  o.source.path = "mock";
  o.bands_file = "mock";
  return o;
}

TEST(LightCurveSimulation, RecoversAtLeast98PercentOfPeriodsTo1e4AndMeansWithinErrors) {
  // Known truth: 150 Cepheid-like stars, periods log-uniform in 1.5-50 d, V/I/Ks with
  // 120/80/50 uneven epochs in eight yearly seasons of 160 nights, 12 mmag noise: a survey
  // that pins every period to better than 1e-4 (fewer seasons cannot, for the long periods:
  // see the demo test, where the stated errors say so).
  Random rng(31);
  LightCurveOptions o = mock_options();
  int recovered = 0, n = 150, within_2sigma = 0, bands = 0;
  for (int i = 0; i < n; ++i) {
    const double period = std::pow(10.0, rng.uniform(std::log10(1.5), std::log10(50.0)));
    test::MockStar star = test::mock_cepheid(rng, period, {120, 80, 50}, 0.012, 8);
    StarResult r = analyse_star(star.series, o, false);
    EXPECT_LT(std::abs(r.period_d - period), 4 * r.period_err_d) << period;
    if (std::abs(r.period_d / period - 1) < 1e-4)
      ++recovered;
    else
      continue;
    for (std::size_t b = 0; b < r.bands.size(); ++b) {
      const test::MockCurve& c = star.curves[b];
      double flux = 0;
      for (int k = 0; k < 4000; ++k)
        flux += std::pow(10.0, -0.4 * c.magnitude(c.t0 + c.period_d * (k + 0.5) / 4000));
      const double truth = -2.5 * std::log10(flux / 4000);
      within_2sigma += std::abs(r.bands[b].measures.intensity_mean - truth) <
                       2 * r.bands[b].measures.intensity_mean_err;
      ++bands;
    }
  }
  EXPECT_GE(recovered, static_cast<int>(std::ceil(0.98 * n)));
  // A 2-sigma interval holds 95.4% of Gaussian errors; the errors are honest when 90-99% do.
  const double coverage = static_cast<double>(within_2sigma) / bands;
  EXPECT_GT(coverage, 0.90);
  EXPECT_LT(coverage, 0.99);
}

TEST(LightCurveSimulation, SharedPeriodBeatsTheSparseBandAlone) {
  // Ks with only 14 epochs: alone it often finds a wrong peak; searched together with V
  // and I (shared period) it is right nearly always.
  Random rng(41);
  LightCurveOptions o = mock_options();
  o.min_points = 8;
  int alone = 0, shared = 0;
  const int n = 60;
  for (int i = 0; i < n; ++i) {
    const double period = std::pow(10.0, rng.uniform(0.3, 1.6));
    test::MockStar star = test::mock_cepheid(rng, period, {30, 20, 14}, 0.03);
    StarSeries ks{"MOCK", {"Ks"}, {star.series.series[2]}};
    alone += std::abs(analyse_star(ks, o, false).period_d / period - 1) < 1e-3;
    shared += std::abs(analyse_star(star.series, o, false).period_d / period - 1) < 1e-3;
  }
  EXPECT_GE(shared, n - 2);
  EXPECT_LT(alone, shared - 10);
}

TEST(LightCurveStage, FlagsANoiseOnlyStarAsNotSignificant) {
  Random rng(51);
  StarSeries s{"NOISE", {"V"}, {}};
  TimeSeries ts;
  for (double t : test::mock_epochs(rng, 50)) {
    ts.t.push_back(t);
    ts.y.push_back(14 + rng.normal(0, 0.02));
    ts.dy.push_back(0.02);
  }
  s.series.push_back(ts);
  StarResult r = analyse_star(s, mock_options(), false);
  EXPECT_FALSE(r.usable);
  EXPECT_NE(period_flag_names(r.flags).find("not_significant"), std::string::npos);
}

// Sparse three-band sampling (45 epochs over 1,050 days, Gaia-like) of a curve of period P
// with harmonics A_1..A_3; known truth.
StarSeries sparse_star(std::uint64_t seed, double period_d, const std::vector<double>& amplitude) {
  Random rng(seed);
  StarSeries s{"S", {"G", "BP", "RP"}, {}};
  std::vector<double> t;
  for (int i = 0; i < 45; ++i) t.push_back(2456900.0 + rng.uniform(0, 1050));
  for (double scale : {1.0, 1.3, 0.7}) {
    test::MockCurve c;
    c.period_d = period_d;
    c.amplitude = amplitude;
    for (double& a : c.amplitude) a *= scale;
    s.series.push_back(test::mock_series(c, t, 0.005, rng));
  }
  return s;
}

TEST(LightCurveStage, ANearSinusoidIsNotTakenAtTwiceOrThriceItsPeriod) {
  // Three harmonics fit a sinusoid of period P as well at 2P and 3P (as their second or
  // third): the search's highest peak is often there. The stage takes the fundamental.
  LightCurveOptions o = mock_options();
  o.search_harmonics = 3;
  o.min_period_d = 0.2, o.max_period_d = 60;
  int at_p = 0, usable = 0;
  for (std::uint64_t seed = 1; seed <= 30; ++seed) {
    const double period = 3.0 + static_cast<double>(seed);
    const StarResult r = analyse_star(sparse_star(seed, period, {0.3}), o, false);
    at_p += std::abs(r.period_d / period - 1) < 1e-3;
    usable += r.usable;
  }
  EXPECT_EQ(at_p, 30);
  EXPECT_EQ(usable, 30);
}

TEST(LightCurveStage, ACepheidShapedCurveKeepsItsFundamental) {
  // With real harmonics, the nested model at 2f or 3f lacks the fundamental: no switch.
  LightCurveOptions o = mock_options();
  o.search_harmonics = 3;
  o.min_period_d = 0.2, o.max_period_d = 60;
  for (std::uint64_t seed = 1; seed <= 20; ++seed) {
    const double period = 2.5 + 1.7 * static_cast<double>(seed);
    const StarResult r = analyse_star(sparse_star(seed, period, {0.3, 0.12, 0.05}), o, false);
    EXPECT_NEAR(r.period_d / period, 1.0, 1e-3) << period;
    EXPECT_TRUE(r.usable) << period;
  }
}

TEST(Periodogram, TheFundamentalOfASubharmonicPeakIsItsMultiple) {
  // fundamental_frequency directly: from f0 / 2 and f0 / 3 of a sinusoid it returns f0 (to a
  // fraction of the grid step); from f0 of a three-harmonic curve, f0.
  const StarSeries sine = sparse_star(7, 5.5, {0.3});
  const double step = 1.0 / (5 * 1050.0), f0 = 1 / 5.5;
  EXPECT_NEAR(fundamental_frequency(sine.series, f0 / 2, step, 3, 5.0), f0, step);
  EXPECT_NEAR(fundamental_frequency(sine.series, f0 / 3, step, 3, 5.0), f0, step);
  EXPECT_EQ(fundamental_frequency(sine.series, f0 / 2, step, 1, 5.0), f0 / 2);  // one harmonic
  EXPECT_EQ(fundamental_frequency(sine.series, f0 / 2, step, 3, 0.1), f0 / 2);  // beyond range
  const StarSeries cepheid = sparse_star(7, 5.5, {0.3, 0.12, 0.05});
  EXPECT_EQ(fundamental_frequency(cepheid.series, f0, step, 3, 5.0), f0);
}

TEST(LightCurveStage, TooFewEpochsGiveNoPeriod) {
  Random rng(52);
  test::MockStar star = test::mock_cepheid(rng, 5.0, {8, 6, 5});
  StarResult r = analyse_star(star.series, mock_options(), false);
  EXPECT_FALSE(r.usable);
  EXPECT_EQ(period_flag_names(r.flags), "too_few_points");
  EXPECT_EQ(r.skipped_bands.size(), 3u);
}

// The demo's light curves (simulated from sample_data's truth): every usable period within
// 4 sigma of the catalog's (which is the truth), and the intensity means agree with the catalog's
// mean magnitudes (simulated with 0.015 mag noise) within the combined error.
TEST(LightCurveStage, DemoLightCurvesGiveTheCatalogPeriodsAndMeans) {
  test::TempDir dir;
  auto r =
      test::run_stage("lightcurve", "--config " + test::source_file("config/demo/lightcurve.toml") +
                                        " --out " + dir.file("lc.fits") + " --quiet");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  SourceTable summary = read_fits_table(dir.file("lc.fits"), {"SUMMARY", 0});
  SourceTable catalog =
      read_fits_table(test::source_file("sample_data/calibrators.fits"), {"STARS", 0});
  std::map<std::string, std::size_t> row;
  for (std::size_t i = 0; i < catalog.table.rows(); ++i)
    row[catalog.table.column("STAR").text[i]] = i;
  const StarTable& s = summary.table;
  ASSERT_EQ(s.rows(), 100u);
  int usable = 0, period_ok = 0, mags = 0, mags_ok = 0;
  for (std::size_t i = 0; i < s.rows(); ++i) {
    if (!s.column("usable").boolean[i]) continue;
    ++usable;
    const std::size_t c = row.at(s.column("id").text[i]);
    const double truth = catalog.table.column("PERIOD").real[c], p = s.column("period_d").real[i];
    period_ok += std::abs(p / truth - 1) < 1e-4;
    EXPECT_LT(std::abs(p - truth), 4 * s.column("period_err_d").real[i]) << s.column("id").text[i];
    for (const char* b : {"V", "I", "Ks"}) {
      const double lc = s.column(std::string("mag_") + b).real[i],
                   err = s.column(std::string("mag_err_") + b).real[i];
      const double cat = catalog.table.column(std::string(b) + "_MEAN").real[c];
      ++mags;
      mags_ok += std::abs(lc - cat) < 3 * std::hypot(err, 0.015);
    }
  }
  EXPECT_GE(usable, 98);
  // Four seasons over three years pin a 40-day period to ~1e-4 (its stated error): the few
  // long periods beyond 1e-4 are still within 4 sigma above.
  EXPECT_GE(period_ok, usable * 95 / 100);
  EXPECT_GE(mags_ok, mags * 97 / 100);
  // The products a person and the report read.
  EXPECT_TRUE(test::file_exists(dir.file("lc.csv")));
  SourceTable points = read_fits_table(dir.file("lc.fits"), {"POINTS", 0});
  EXPECT_EQ(points.table.rows(), 12500u);
  SourceTable pg = read_fits_table(dir.file("lc.fits"), {"PERIODOGRAM", 0});
  EXPECT_GT(pg.table.rows(), 3000u);
}

TEST(LightCurveStage, AStarResultCrossesBetweenRanksBitForBit) {
  // Under MPI a rank receives the stars another rank measured (core/cluster.hpp): what it
  // writes must be the same bytes as if it had measured them itself.
  Random rng(5);
  test::MockStar star = test::mock_cepheid(rng, 7.3, {120, 80, 50}, 0.012, 4);
  StarResult r = analyse_star(star.series, mock_options(), true);
  r.skipped_bands = {"J"};
  r.second_peak_period_d = std::numeric_limits<double>::quiet_NaN();
  ASSERT_EQ(r.bands.size(), 3u);
  const std::string bytes = encode_star_result(r);
  const StarResult back = decode_star_result(bytes);
  EXPECT_EQ(encode_star_result(back), bytes);
  EXPECT_EQ(back.id, r.id);
  EXPECT_EQ(back.period_d, r.period_d);
  EXPECT_TRUE(std::isnan(back.second_peak_period_d));
  EXPECT_EQ(back.bands[2].band, r.bands[2].band);
  EXPECT_EQ(back.bands[2].curve.covariance, r.bands[2].curve.covariance);
  EXPECT_EQ(back.bands[1].measures.phi31, r.bands[1].measures.phi31);
  EXPECT_EQ(back.periodogram, r.periodogram);
  EXPECT_EQ(back.grid.count, r.grid.count);
  EXPECT_EQ(back.skipped_bands, r.skipped_bands);
  EXPECT_THROW(decode_star_result(bytes.substr(0, bytes.size() - 1)), std::logic_error);
}

TEST(LightCurveStage, ResultsDoNotDependOnTheThreadCount) {
  test::TempDir dir;
  std::string cfg = "--config " + test::source_file("config/demo/lightcurve.toml");
  ASSERT_EQ(test::run_stage("lightcurve", cfg + " --threads 1 --quiet --out " + dir.file("a.fits"))
                .exit_code,
            0);
  ASSERT_EQ(test::run_stage("lightcurve", cfg + " --threads 2 --quiet --out " + dir.file("b.fits"))
                .exit_code,
            0);
  auto strip_date = [](std::string text) {
    std::istringstream in(text);
    std::string line, out;
    while (std::getline(in, line))
      if (line.rfind("# DATE", 0) != 0) out += line + "\n";
    return out;
  };
  EXPECT_EQ(strip_date(test::read_text(dir.file("a.csv"))),
            strip_date(test::read_text(dir.file("b.csv"))));
}

// A small light-curve config around an input file in the same folder.
std::string lc_config(const std::string& extra_source = "", const std::string& extra = "") {
  return "bands_file = \"" + test::source_file("config/bands.toml") +
         "\"\n[source]\npath = \"in.csv\"\n" + extra_source +
         "[columns]\nstar = \"star\"\ntime = \"t\"\nband = \"band\"\nmag = \"mag\"\nmag_err = "
         "\"err\"\n" +
         extra + "[output]\npath = \"out/lc.fits\"\n";
}

// 30 V epochs of one star with a clear 3.7-day period, as CSV text.
std::string good_rows(const std::string& star = "S1") {
  std::string out;
  for (int i = 0; i < 30; ++i) {
    const double t = 2460000.0 + 7.13 * i + 0.37 * (i % 5);
    out += fmt::format("{},{:.5f},V,{:.4f},0.01\n", star, t,
                       12.0 + 0.3 * std::sin(2 * std::numbers::pi * t / 3.7));
  }
  return out;
}

struct LcBadCase {
  const char* name;
  std::string config;
  std::string input;
  std::string rule;
};

// Test names in listings, not the struct's bytes.
void PrintTo(const LcBadCase& c, std::ostream* os) { *os << c.name; }

std::vector<LcBadCase> lc_bad_cases() {
  const std::string header = "star,t,band,mag,err\n";
  return {
      {"UnknownConfigKey", lc_config("", "[search]\nmax_periood = 50\n"), header + good_rows(),
       "unknown_config_key"},
      {"PeriodRangeInverted", lc_config("", "[search]\nmin_period = 20\nmax_period = 10\n"),
       header + good_rows(), "config_value"},
      {"UnknownTimeScale", lc_config("time_scale = \"tcb\"\n"), header + good_rows(),
       "config_value"},
      {"MissingColumn", lc_config(), "star,time,band,mag,err\n" + good_rows(), "missing_column"},
      {"EmptyFile", lc_config(), header, "empty_file"},
      {"EveryRowRefused", lc_config(),
       header + "S1,2460000.1,Q,12.0,0.01\nS1,2460001.1,Q,12.1,0.01\n", "no_rows_left"},
      {"MissingInput", lc_config(), "", "unreadable_file"},
      {"RaggedRow", lc_config(), header + "S1,2460000.1,V,12.0\n", "field_count"},
  };
}

class LightCurveBadInput : public ::testing::TestWithParam<LcBadCase> {};

TEST_P(LightCurveBadInput, StopsWithItsRuleAndExitCode2AndWritesNothing) {
  const LcBadCase& c = GetParam();
  test::TempDir dir;
  test::write_text(dir.file("c.toml"), c.config);
  if (std::string(c.name) != "MissingInput") test::write_text(dir.file("in.csv"), c.input);
  auto r = test::run_stage("lightcurve", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[" + c.rule + "]"), std::string::npos) << r.output;
  EXPECT_TRUE(r.output.find("c.toml") != std::string::npos ||
              r.output.find("in.csv") != std::string::npos)
      << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out/lc.fits")));
}

INSTANTIATE_TEST_SUITE_P(Cases, LightCurveBadInput, ::testing::ValuesIn(lc_bad_cases()),
                         [](const auto& case_info) { return std::string(case_info.param.name); });

TEST(LightCurveRows, ARepeatedEpochIsFoundInOrderAndOutOfOrder) {
  // Epochs usually come in time order per star and band; a repeat must be caught either way.
  LightCurveOptions o = mock_options();
  o.star_column = "star";
  o.time_column = "t";
  o.band_column = "band";
  o.mag_column = "mag";
  o.err_column = "err";
  SourceTable in = parse_text_table(
      "star,t,band,mag,err\n"
      "A,3,V,12,0.01\nA,5,V,12,0.01\nA,5,V,12,0.01\n"   // line 4: in-order repeat
      "A,1,V,12,0.01\nA,2,I,12,0.01\nA,3,V,12,0.01\n"   // line 7: out-of-order repeat
      "A,2,I,12,0.01\nB,5,V,12,0.01\nA,1,V,12,0.01\n",  // lines 8 and 10: repeats
      "rows.csv", TextReadOptions{});
  std::vector<ObservationReject> rejected;
  std::vector<std::string> bands;
  const std::vector<StarSeries> stars = group_observations(
      in, o, BandTable::from_file(test::source_file("config/bands.toml")), rejected, bands);
  ASSERT_EQ(rejected.size(), 4u);
  const std::int64_t lines[] = {4, 7, 8, 10};
  for (std::size_t i = 0; i < 4; ++i) {
    EXPECT_EQ(rejected[i].rule, "duplicate_epoch");
    EXPECT_EQ(rejected[i].source_row, lines[i]);
  }
  ASSERT_EQ(stars.size(), 2u);
  EXPECT_EQ(stars[0].series[0].t, (std::vector<double>{3, 5, 1}));  // V, as read
  EXPECT_EQ(stars[0].series[1].t, (std::vector<double>{2}));        // I
}

TEST(LightCurveRows, BadRowsAreRefusedWithTheirRuleAndTheRestIsMeasured) {
  test::TempDir dir;
  test::write_text(dir.file("c.toml"), lc_config());
  test::write_text(dir.file("in.csv"),
                   "star,t,band,mag,err\n" + good_rows() +
                       "S1,2460500.5,Q,12.0,0.01\n"      // line 32: band not in the table
                       "S1,2460501.5,V,12.0,0\n"         // 33: zero error
                       "S1,2460000.00000,V,12.0,0.01\n"  // 34: same epoch again
                       ",2460502.5,V,12.0,0.01\n"        // 35: no star
                       "S1,2460503.5,V,abc,0.01\n");     // 36: not a number
  auto r = test::run_stage("lightcurve", "--config " + dir.file("c.toml"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  StarTable rej = read_fits_table(dir.file("out/lc.fits"), {"REJECTS", 0}).table;
  ASSERT_EQ(rej.rows(), 5u);
  const char* rules[] = {"unknown_band", "magnitude_error_nonpositive", "duplicate_epoch",
                         "missing_required", "not_a_number"};
  for (std::size_t i = 0; i < 5; ++i) {
    EXPECT_EQ(rej.column("rule").text[i], rules[i]);
    EXPECT_EQ(rej.column("source_row").integer[i], static_cast<std::int64_t>(32 + i));
  }
  StarTable sum = read_fits_table(dir.file("out/lc.fits"), {"SUMMARY", 0}).table;
  ASSERT_EQ(sum.rows(), 1u);
  EXPECT_TRUE(sum.column("usable").boolean[0]);
  EXPECT_NEAR(sum.column("period_d").real[0], 3.7, 1e-4);
  EXPECT_EQ(sum.column("n_V").integer[0], 30);
  // Units and provenance for whoever reads the product.
  EXPECT_EQ(sum.column("period_d").unit, "d");
  ASSERT_NE(sum.keyword("RGTIMESC"), nullptr);
  EXPECT_EQ(std::get<std::string>(sum.keyword("RGTIMESC")->value), "bjd_tdb");
  ASSERT_NE(sum.keyword("RGSTAGE"), nullptr);
}

// The demo's first stars, written as a survey publishes them: one headerless file per star
// and band, "time mag err" in whitespace columns, times as BJD - 2450000, at the path
// file_of(star, band) gives under lc/; the light curves read from them (name_pattern) and
// from one table must agree.
void expect_per_star_files_match_one_table(
    const std::function<std::string(const std::string&, const std::string&)>& file_of,
    const std::string& glob, const std::string& name_pattern) {
  test::TempDir dir;
  const SourceTable all = read_text_table(test::source_file("sample_data/lightcurves.csv"), {});
  const StarTable& t = all.table;
  std::map<std::string, std::string> files;  // file name -> content
  std::string table = "star,time,band,mag,mag_err\n";
  std::set<std::string> stars;
  for (std::size_t r = 0; r < t.rows(); ++r) {
    const std::string star = t.column("star").text[r];
    if (!stars.count(star) && stars.size() == 4) continue;
    stars.insert(star);
    const double time = std::stod(t.column("time_bjd_tdb").text[r]);
    const std::string band = t.column("band").text[r], mag = t.column("mag").text[r],
                      err = t.column("mag_err").text[r];
    table += fmt::format("{},{:.4f},{},{},{}\n", star, time, band, mag, err);
    files[file_of(star, band)] += fmt::format("{:.4f}  {}  {}\n", time - 2450000.0, mag, err);
  }
  test::write_text(dir.file("one/table.csv"), table);
  for (const auto& [name, content] : files) test::write_text(dir.file("lc/" + name), content);
  const std::string common = "bands_file = \"" + test::source_file("config/bands.toml") + "\"\n";
  test::write_text(dir.file("one.toml"),
                   common +
                       "[source]\npath = \"one/table.csv\"\n[columns]\ntime = \"time\"\n"
                       "[output]\npath = \"out/one.fits\"\n");
  test::write_text(
      dir.file("files.toml"),
      common + "[source]\npath = \"" + glob + "\"\nname_pattern = \"" + name_pattern +
          "\"\nheader = false\n"
          "delimiter = \"whitespace\"\ncolumn_names = [\"time\", \"mag\", \"mag_err\"]\n"
          "time_offset_d = 2450000\n[columns]\ntime = \"time\"\n[output]\npath = "
          "\"out/files.fits\"\n");
  const LightCurveResult one = run_lightcurves(lightcurve_options_from_file(dir.file("one.toml")));
  const LightCurveOptions fo = lightcurve_options_from_file(dir.file("files.toml"));
  const LightCurveResult per = run_lightcurves(fo);
  EXPECT_EQ(per.provenance.inputs.size(), files.size());  // every file, with its hash
  // The stage declares the glob; every file it matches, and the band table, key it.
  EXPECT_EQ(declared_files(fo).input_globs, std::vector<std::string>{fo.source.path});
  EXPECT_EQ(input_files_now(declared_files(fo)).size(), files.size() + 1);
  ASSERT_EQ(per.stars.size(), 4u);
  ASSERT_EQ(one.stars.size(), 4u);
  const StarTable a = one.summary_table(TimeScale::kBjdTdb),
                  b = per.summary_table(TimeScale::kBjdTdb);
  for (std::size_t i = 0; i < a.rows(); ++i) {
    EXPECT_EQ(a.column("id").text[i], b.column("id").text[i]);
    EXPECT_NEAR(b.column("period_d").real[i], a.column("period_d").real[i],
                1e-7 * a.column("period_d").real[i]);
    EXPECT_NEAR(b.column("t_ref").real[i], a.column("t_ref").real[i], 1e-6);
    for (const char* band : {"mag_V", "mag_I", "mag_Ks"})
      EXPECT_NEAR(b.column(band).real[i], a.column(band).real[i], 1e-7) << band;
  }
}

TEST(LightCurveFiles, PerStarFilesGiveTheSameResultsAsOneTable) {
  expect_per_star_files_match_one_table(
      [](const std::string& star, const std::string& band) { return star + "." + band + ".dat"; },
      "lc/*.dat", "{star}.{band}.dat");
}

TEST(LightCurveFiles, TheBandCanComeFromTheFolder) {
  // As OGLE publishes light curves: one folder per band (phot/I/, phot/V/), each holding a
  // file per star named by its id.
  expect_per_star_files_match_one_table(
      [](const std::string& star, const std::string& band) {
        return "phot/" + band + "/" + star + ".dat";
      },
      "lc/phot/*/*.dat", "{band}/{star}.dat");
}

TEST(LightCurveFiles, RealSurveyFilesGiveThePublishedPeriods) {
  // Three SDSS Stripe 82 RR Lyrae stars as published by Sesar et al. 2010 (ApJ 708, 717),
  // one CSV per star with a header (time as MJD, mag, magerr, band u g r i z), the star id
  // in the file name (tests/data/README.md). The periods of the paper's Table 2. RRab light
  // curves are far from sinusoids: with a one-harmonic periodogram star 13350 lands on its
  // one-day alias (0.3537 d, flagged "alias"); three harmonics find the true period.
  test::TempDir dir;
  // The SDSS bands are not in config/bands.toml; the period search does not use their
  // wavelengths (Fukugita et al. 1996 effective wavelengths, memory).
  std::string bands;
  for (const auto& [b, aa] :
       {std::pair{"u", 3551.0}, {"g", 4686.0}, {"r", 6166.0}, {"i", 7480.0}, {"z", 8932.0}})
    bands += fmt::format(
        "[bands.{}]\nsystem = \"SDSS\"\nwavelength_aa = {}\nwavelength_kind = \"effective\"\n"
        "source = \"Fukugita et al. 1996 (memory)\"\n",
        b, aa);
  test::write_text(dir.file("bands.toml"), bands);
  test::write_text(dir.file("lc.toml"),
                   "bands_file = \"bands.toml\"\n[source]\npath = \"" +
                       test::source_file("tests/data/sdss_stripe82_rrlyrae/*.csv") +
                       "\"\nname_pattern = \"{star}.csv\"\ntime_scale = \"mjd\"\n"
                       "[columns]\ntime = \"time\"\nmag_err = \"magerr\"\n"
                       "[search]\nmin_period = 0.2\nmax_period = 1.0\nharmonics = 3\n"
                       "[output]\npath = \"out/lc.fits\"\n");
  const LightCurveResult r = run_lightcurves(lightcurve_options_from_file(dir.file("lc.toml")));
  ASSERT_EQ(r.stars.size(), 3u);
  // Table 2: period (d) and the best-fit template's r-band amplitude Ar (mag).
  const std::map<std::string, std::pair<double, double>> published = {
      {"13350", {0.547987422171, 0.801719568295}},
      {"27887", {0.311494036020, 0.298374341043}},
      {"4099", {0.641754351271, 0.398325831838}}};
  for (const StarResult& star : r.stars) {
    ASSERT_TRUE(published.count(star.id)) << star.id;
    // About 60 epochs per band over 8 years: the periods agree to about 1e-6 d.
    EXPECT_NEAR(star.period_d, published.at(star.id).first, 5e-6) << star.id;
    ASSERT_EQ(star.bands.size(), 5u) << star.id;
    // A template and a Fourier series differ at a sharp maximum by a few hundredths.
    for (const BandResult& b : star.bands) {
      if (b.band == "r") {
        EXPECT_NEAR(b.measures.amplitude, published.at(star.id).second, 0.05) << star.id;
      }
    }
  }
}

TEST(LightCurveFiles, AFileNameThatDoesNotMatchOrNoFileAtAllStopsWithItsRule) {
  test::TempDir dir;
  const std::string common = "bands_file = \"" + test::source_file("config/bands.toml") + "\"\n";
  test::write_text(dir.file("lc/S1.V.dat"), "1.0 12.0 0.01\n");
  test::write_text(dir.file("lc/README.dat"), "1.0 12.0 0.01\n");  // no {band} part
  const std::string cfg =
      common +
      "[source]\npath = \"lc/*.dat\"\nname_pattern = \"{star}.{band}.dat\"\nheader = false\n"
      "delimiter = \"whitespace\"\ncolumn_names = [\"time\", \"mag\", \"mag_err\"]\n"
      "[columns]\ntime = \"time\"\n[output]\npath = \"out/lc.fits\"\n";
  test::write_text(dir.file("c.toml"), cfg);
  auto r = test::run_stage("lightcurve", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("README.dat"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("[file_name_pattern]"), std::string::npos) << r.output;
  test::write_text(dir.file("c.toml"), test::replaced(cfg, {{"lc/*.dat", "none/*.dat"}}));
  r = test::run_stage("lightcurve", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[no_files]"), std::string::npos) << r.output;
  test::write_text(dir.file("c.toml"), test::replaced(cfg, {{"{star}.{band}.dat", "{band}.dat"}}));
  r = test::run_stage("lightcurve", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("must hold {star}"), std::string::npos) << r.output;
  // A folder in the pattern: the file's folder must match it too ("lc" is not a band folder
  // named V here, so lc/S1.V.dat has no part "phot").
  test::write_text(dir.file("c.toml"),
                   test::replaced(cfg, {{"{star}.{band}.dat", "phot/{star}.{band}.dat"}}));
  r = test::run_stage("lightcurve", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[file_name_pattern]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("'lc/README.dat' does not match"), std::string::npos) << r.output;
  test::write_text(dir.file("c.toml"),
                   test::replaced(cfg, {{"{star}.{band}.dat", "../{star}.{band}.dat"}}));
  r = test::run_stage("lightcurve", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("source.name_pattern"), std::string::npos) << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
}

TEST(IngestJoin, LightCurvePeriodsAndMeansReplaceTheCatalogsAndSayWhere) {
  // The demo chain: light curves of the first 100 calibrators joined onto all 120.
  test::TempDir dir;
  ASSERT_EQ(
      test::run_stage("lightcurve", "--config " + test::source_file("config/demo/lightcurve.toml") +
                                        " --quiet --out " + dir.file("lc.fits"))
          .exit_code,
      0);
  auto r = test::run_stage("ingest", "--config " + test::source_file("config/demo/ingest.toml") +
                                         " --out " + dir.file("cat.fits") + " --lightcurves " +
                                         dir.file("lc.fits"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  StarTable cat = read_fits_table(dir.file("cat.fits"), {"CATALOG", 0}).table;
  StarTable lc = read_fits_table(dir.file("lc.fits"), {"SUMMARY", 0}).table;
  std::map<std::string, std::size_t> lc_row;
  for (std::size_t i = 0; i < lc.rows(); ++i) lc_row[lc.column("id").text[i]] = i;
  int from_lc = 0, from_catalog = 0;
  for (std::size_t i = 0; i < cat.rows(); ++i) {
    auto it = lc_row.find(cat.column("id").text[i]);
    if (cat.column("period_origin").text[i] == "lightcurve") {
      ++from_lc;
      ASSERT_NE(it, lc_row.end());
      EXPECT_DOUBLE_EQ(cat.column("period_d").real[i], lc.column("period_d").real[it->second]);
      EXPECT_DOUBLE_EQ(cat.column("log_period").real[i],
                       std::log10(lc.column("period_d").real[it->second]));
      EXPECT_DOUBLE_EQ(cat.column("mag_V").real[i], lc.column("mag_V").real[it->second]);
      EXPECT_DOUBLE_EQ(cat.column("mag_err_Ks").real[i], lc.column("mag_err_Ks").real[it->second]);
    } else {
      ++from_catalog;
      EXPECT_EQ(it, lc_row.end());  // every demo light curve gives a usable period
    }
  }
  EXPECT_EQ(from_lc, 100);
  EXPECT_EQ(from_catalog, static_cast<int>(cat.rows()) - 100);
  // The summary is one of the catalog's recorded inputs.
  bool recorded = false;
  for (const auto& k : cat.header())
    if (std::holds_alternative<std::string>(k.value) &&
        std::get<std::string>(k.value).find("lc.fits") != std::string::npos)
      recorded = true;
  EXPECT_TRUE(recorded);
}

}  // namespace
}  // namespace rungcal
