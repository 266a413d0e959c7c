// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/simulate/study, study_pool and study_paired: the simulation study's
// summary, its per-mock figures, pooling runs on distinct seeds and pairing runs on the same
// (simulations with a known truth; the study's own bias and coverage checks are in
// hierarchical_test.cpp).
#include "rungcal/simulate/study.hpp"

#include <cmath>

#include <gtest/gtest.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/simulate/study_paired.hpp"
#include "rungcal/simulate/study_pool.hpp"
#include "rungcal/simulate/study_setup.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// A small, quick study: 150 Wesenheit stars on the disk, no contamination (or those listed),
// seeds first..
StudyResult small_run(std::uint64_t first, int mocks, int stars = 150,
                      const std::string& contaminations = "none") {
  StudyChoices c;
  c.contaminations = contaminations;
  c.seed = first;
  StudyOptions o;
  apply_study_choices(c, o);
  o.mocks = mocks;
  o.scenario.stars = stars;
  o.threads = 1;
  const auto level = spdlog::get_level();
  spdlog::set_level(spdlog::level::err);  // each clean mock warns that f has no error
  StudyResult r = run_study(o);
  spdlog::set_level(level);
  r.header["setup"] = {{"stars", stars}};  // as rungcal-study records its settings
  return r;
}

std::string written(const test::TempDir& dir, const std::string& name, const StudyResult& r) {
  const std::string path = dir.file(name);
  write_file_atomically(path, r.to_json().dump(2));
  return path;
}

// The rule and key of the InputError f throws ("" when it does not).
template <typename F>
std::string refusal(F&& f) {
  try {
    f();
  } catch (const InputError& e) {
    return e.rule() + " at " + e.where().column;
  }
  return "";
}

void expect_same_rows(const StudyResult& a, const StudyResult& b) {
  ASSERT_EQ(a.rows.size(), b.rows.size());
  EXPECT_EQ(a.mocks, b.mocks);
  EXPECT_EQ(a.failed, b.failed);
  for (std::size_t j = 0; j < a.rows.size(); ++j) {
    SCOPED_TRACE(a.rows[j].parameter);
    EXPECT_EQ(a.rows[j].parameter, b.rows[j].parameter);
    EXPECT_EQ(a.rows[j].used, b.rows[j].used);
    // The JSON keeps doubles to the last bit; only the order of summation may differ.
    EXPECT_NEAR(a.rows[j].mean_estimate, b.rows[j].mean_estimate, 1e-12);
    EXPECT_NEAR(a.rows[j].mean_error, b.rows[j].mean_error, 1e-14);
    EXPECT_NEAR(a.rows[j].bias_in_errors, b.rows[j].bias_in_errors, 1e-9);
    EXPECT_NEAR(a.rows[j].spread_to_error, b.rows[j].spread_to_error, 1e-9);
    EXPECT_DOUBLE_EQ(a.rows[j].coverage, b.rows[j].coverage);
  }
}

TEST(Study, KeepsEachMocksFiguresInSeedOrder) {
  const StudyResult r = small_run(7, 3);
  ASSERT_EQ(r.per_mock.size(), 3U);
  for (std::size_t k = 0; k < 3; ++k) {
    EXPECT_EQ(r.per_mock[k].seed, 7 + k);
    EXPECT_TRUE(r.per_mock[k].ok) << r.per_mock[k].failure;
    ASSERT_EQ(r.per_mock[k].estimate.size(), 5U);
  }
  // The summary is made of them: alpha's mean estimate and coverage by hand.
  double mean = 0;
  int covered = 0;
  for (const StudyMock& d : r.per_mock) {
    mean += d.estimate[0] / 3.0;
    covered += std::abs(d.estimate[0] - (-5.9)) <= d.error[0] ? 1 : 0;
  }
  EXPECT_NEAR(r.rows[0].mean_estimate, mean, 1e-12);
  EXPECT_DOUBLE_EQ(r.rows[0].coverage, covered / 3.0);
  const nlohmann::json j = r.to_json();
  EXPECT_EQ(j["per_mock"].size(), 3U);
  EXPECT_EQ(j["parameter_names"][0], "alpha");
  EXPECT_DOUBLE_EQ(j["truth"]["alpha"].get<double>(), -5.9);
  // Beside them, the mixture's fitted shape: the factor (free by default, above 3), a fraction.
  for (const StudyMock& d : r.per_mock) {
    ASSERT_EQ(d.mixture.size(), 4U);
    EXPECT_GT(d.mixture.at("outlier_parallax_factor"), 3.0);
    EXPECT_LT(d.mixture.at("outlier_parallax_factor"), 1e6);
    EXPECT_GE(d.mixture.at("outlier_fraction"), 0.0);
    EXPECT_LT(d.mixture.at("outlier_fraction"), 1.0);
  }
  EXPECT_DOUBLE_EQ(j["per_mock"][0]["mixture"]["outlier_parallax_factor"].get<double>(),
                   r.per_mock[0].mixture.at("outlier_parallax_factor"));
}

TEST(Study, PoolingTwoRunsIsOneRunOfAllTheirMocks) {
  test::TempDir dir;
  const std::string a = written(dir, "a.json", small_run(1, 3));
  const std::string b = written(dir, "b.json", small_run(4, 3));
  const StudyResult pooled = combine_studies({a, b});
  expect_same_rows(pooled, small_run(1, 6));
  // A run read back is the run, its mixture shapes too.
  const StudyResult back = read_study_run(a);
  expect_same_rows(back, small_run(1, 3));
  EXPECT_EQ(back.per_mock[1].mixture, small_run(1, 3).per_mock[1].mixture);
}

TEST(Study, PoolingRefusesRepeatedSeedsAndOtherSetups) {
  test::TempDir dir;
  const std::string a = written(dir, "a.json", small_run(1, 2));
  const std::string overlap = written(dir, "overlap.json", small_run(2, 2));
  const std::string other = written(dir, "other.json", small_run(10, 2, 120));
  EXPECT_EQ(refusal([&] { combine_studies({a, overlap}); }), "study_seed_repeated at per_mock");
  EXPECT_EQ(refusal([&] { combine_studies({a, other}); }), "study_setup_differs at setup.stars");
  // An option the first run's binary did not have yet: unset in the later run, it pools;
  // set, it does not.
  nlohmann::json later = small_run(20, 2).to_json();
  later["setup"]["covariance"] = "";
  later["setup"]["paired"] = "[]";  // an empty list option, as the command line records it
  test::write_text(dir.file("later.json"), later.dump());
  EXPECT_EQ(combine_studies({a, dir.file("later.json")}).per_mock.size(), 4U);
  later["setup"]["covariance"] = "sandwich";
  test::write_text(dir.file("later.json"), later.dump());
  EXPECT_EQ(refusal([&] {
              combine_studies({a, dir.file("later.json")});
            }),
            "study_setup_differs at setup.covariance");
  // A run drawn before each effect had its own stream: the same seed is another mock.
  nlohmann::json earlier = small_run(10, 2).to_json();
  earlier.erase("mock_draw_layout");
  test::write_text(dir.file("earlier.json"), earlier.dump());
  EXPECT_EQ(refusal([&] {
              combine_studies({a, dir.file("earlier.json")});
            }),
            "study_setup_differs at mock_draw_layout");
  nlohmann::json old = nlohmann::json::parse(test::read_text(a));
  old.erase("per_mock");  // a run written before per-mock figures were kept
  test::write_text(dir.file("old.json"), old.dump());
  EXPECT_EQ(refusal([&] { read_study_run(dir.file("old.json")); }),
            "study_no_per_mock at per_mock");
  nlohmann::json bad_truth = nlohmann::json::parse(test::read_text(a));
  bad_truth["truth"]["alpha"] = "faint";
  test::write_text(dir.file("bad_truth.json"), bad_truth.dump());
  EXPECT_EQ(refusal([&] { read_study_run(dir.file("bad_truth.json")); }),
            "study_format at parameter_names");
  nlohmann::json short_mock = nlohmann::json::parse(test::read_text(a));
  short_mock["per_mock"][1]["error"].erase(0);
  test::write_text(dir.file("short.json"), short_mock.dump());
  EXPECT_EQ(refusal([&] { read_study_run(dir.file("short.json")); }),
            "study_format at per_mock[1].error");
}

// Pairing by seed: a run against itself shifts nothing; against a run of the same mocks with
// the parallax outliers on, the mean shift is the mean of the per-mock differences in the
// reference's errors, computed here from the runs' own figures.
TEST(Study, PairingTwoRunsGivesEachMocksShiftInItsError) {
  test::TempDir dir;
  const StudyResult clean = small_run(1, 4);
  const std::string a = written(dir, "a.json", clean);
  // Seeds 2..5: three in common with a.
  const StudyResult dirty = small_run(2, 4, 150, "parallax_outliers");
  const std::string b = written(dir, "b.json", dirty);
  const PairedStudy self = pair_studies(a, a);
  for (const PairedRow& r : self.rows) {
    EXPECT_EQ(r.pairs, 4) << r.parameter;
    EXPECT_EQ(r.mean_shift, 0.0) << r.parameter;
  }
  const PairedStudy p = pair_studies(b, a);
  EXPECT_EQ(p.common_seeds, 3);
  for (std::size_t j = 0; j < p.rows.size(); ++j) {
    double sum = 0, sum2 = 0;
    for (int k = 0; k < 3; ++k) {
      const StudyMock &x = dirty.per_mock[static_cast<std::size_t>(k)],
                      &y = clean.per_mock[static_cast<std::size_t>(k + 1)];
      ASSERT_EQ(x.seed, y.seed);
      const double d = (x.estimate[j] - y.estimate[j]) / y.error[j];
      sum += d, sum2 += d * d;
    }
    SCOPED_TRACE(p.rows[j].parameter);
    EXPECT_EQ(p.rows[j].pairs, 3);
    EXPECT_NEAR(p.rows[j].mean_shift, sum / 3, 1e-12);
    EXPECT_NEAR(p.rows[j].shift_sd, std::sqrt((sum2 - sum * sum / 3) / 2), 1e-9);
    EXPECT_NEAR(p.rows[j].shift_error, p.rows[j].shift_sd / std::sqrt(3.0), 1e-12);
  }
  EXPECT_NE(paired_table(p).find("3 seeds in both"), std::string::npos);
}

TEST(Study, PairingRefusesOtherMocksAndDisjointSeeds) {
  test::TempDir dir;
  const std::string a = written(dir, "a.json", small_run(1, 2));
  const std::string far = written(dir, "far.json", small_run(10, 2));
  const std::string bigger = written(dir, "bigger.json", small_run(1, 2, 160));
  EXPECT_EQ(refusal([&] { pair_studies(a, far); }), "study_no_common_seeds at per_mock");
  EXPECT_EQ(refusal([&] { pair_studies(bigger, a); }), "study_pairing_differs at stars");
  nlohmann::json earlier = nlohmann::json::parse(test::read_text(a));
  earlier.erase("mock_draw_layout");
  test::write_text(dir.file("earlier.json"), earlier.dump());
  EXPECT_EQ(refusal([&] { pair_studies(dir.file("earlier.json"), a); }),
            "study_pairing_differs at mock_draw_layout");
}

}  // namespace
}  // namespace rungcal
