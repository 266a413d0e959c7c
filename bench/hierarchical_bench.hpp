// SPDX-License-Identifier: MIT
#pragma once
// What the hierarchical fit's bootstrap benchmarks share (bench_hierarchical,
// bench_joint_hierarchical): their command line, their mock, how they time the bootstrap and
// the direct solves that say where its time goes.
#include <algorithm>
#include <chrono>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <optional>
#include <string>
#include <vector>

#include "rungcal/core/random.hpp"
#include "rungcal/plfit/model.hpp"
#include "rungcal/simulate/mock_catalog.hpp"

namespace rungcal::bench {

inline double ms_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - t0).count();
}

// RESAMPLES DATA.csv [STARS].
struct Arguments {
  int resamples = 0;
  std::string csv;
  int stars = 0;
};
// Nothing, after saying why on stderr, when the command line is unusable.
inline std::optional<Arguments> arguments(int argc, char** argv, const char* program,
                                          int default_stars) {
  if (argc != 3 && argc != 4) {
    std::fprintf(stderr, "usage: %s RESAMPLES DATA.csv [STARS]\n", program);
    return std::nullopt;
  }
  Arguments a{std::atoi(argv[1]), argv[2], argc == 4 ? std::atoi(argv[3]) : default_stars};
  if (a.resamples < 1) {
    std::fprintf(stderr, "RESAMPLES: at least 1\n");
    return std::nullopt;
  }
  return a;
}

// Relation X as rungcal-study's "wesenheit" preset (no extinction term), with the study's
// blends, parallax outliers and [Fe/H] errors: the contaminations the default fit models.
inline MockScenario contaminated_scenario(int stars) {
  MockScenario s;
  s.seed = 2026;
  s.stars = stars;
  s.sigma_int = 0.08;
  s.alpha = -5.9;
  s.beta = -3.3;
  s.gamma = -0.2;
  s.blend_fraction = 0.03;
  s.parallax_outlier_fraction = 0.03;
  s.feh_error = 0.08;
  return s;
}

// False, after saying why on stderr, when the scenario is unusable.
inline bool usable(const MockScenario& s) {
  const std::string why = s.check();
  if (!why.empty()) std::fprintf(stderr, "scenario: %s\n", why.c_str());
  return why.empty();
}

template <class Result>
struct BootstrapTiming {
  Result base, boot;  // the fit without resamples and with them
  double base_ms = 0, ms_per_resample = 0;
};

// fit(B) runs the whole fit with B resamples. The bootstrap's time is fit(B) less fit(0):
// the full fit, covariance and residuals are the same work in both. The smaller of two runs
// without stands for that part, so noise from a shared machine does not count against the
// resamples.
template <class Fit>
auto time_bootstrap(int resamples, Fit fit) {
  BootstrapTiming<decltype(fit(0))> t;
  t.base_ms = 1e300;
  for (int k = 0; k < 2; ++k) {
    const auto t0 = std::chrono::steady_clock::now();
    t.base = fit(0);
    t.base_ms = std::min(t.base_ms, ms_since(t0));
  }
  const auto t1 = std::chrono::steady_clock::now();
  t.boot = fit(resamples);
  t.ms_per_resample = (ms_since(t1) - t.base_ms) / resamples;
  return t;
}

template <class Result>
void print_timing(const BootstrapTiming<Result>& t, int resamples, int threads) {
  std::printf("rungcal_fit_ms %.4f\n", t.base_ms);
  std::printf("rungcal_resamples %d\n", resamples);
  std::printf("rungcal_ms_per_resample %.5f\n", t.ms_per_resample);
  std::printf("rungcal_threads %d\n", threads);
}

// Where the bootstrap's time goes: up to three resamples of n stars (take(indices of type
// Index, drawn with replacement)) solved by solve(sample) -> FitSolution as the bootstrap
// solves them, and `evaluate` (one -ln L with its gradient) timed. Not part of the
// bootstrap's time.
template <class Index, class Take, class Solve, class Evaluate>
void print_direct_solves(int resamples, std::size_t n, Take take, Solve solve, Evaluate evaluate) {
  Random rng(7);
  const int direct = std::min(resamples, 3);
  double solve_ms = 0;
  int iterations = 0;
  for (int b = 0; b < direct; ++b) {
    std::vector<Index> idx(n);
    for (auto& i : idx) i = static_cast<Index>(rng.below(static_cast<std::uint64_t>(n)));
    const auto sample = take(idx);
    const auto t0 = std::chrono::steady_clock::now();
    const FitSolution s = solve(sample);
    solve_ms += ms_since(t0);
    iterations += s.iterations;
    std::printf("direct_resample %d %s\n", b, s.brief_report.c_str());
  }
  std::printf("direct_ms_per_resample %.3f\n", solve_ms / direct);
  std::printf("direct_iterations_per_resample %.1f\n", static_cast<double>(iterations) / direct);
  const auto t2 = std::chrono::steady_clock::now();
  const int evaluations = 20;
  for (int k = 0; k < evaluations; ++k) evaluate();
  std::printf("rungcal_ms_per_evaluation %.3f\n", ms_since(t2) / evaluations);
}

}  // namespace rungcal::bench
