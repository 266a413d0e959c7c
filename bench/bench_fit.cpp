// SPDX-License-Identifier: MIT
// Times rungcal's bootstrap of a parallax-space Huber fit on simulated stars and writes the
// data so bench/compare_fit.py can time scipy on the same stars.
// Usage: bench_fit STARS RESAMPLES DATA.csv
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <thread>

#include "mock_samples.hpp"
#include "rungcal/core/log.hpp"
#include "rungcal/plfit/fit_stage.hpp"

using namespace rungcal;

int main(int argc, char** argv) {
  if (argc != 4) {
    std::fprintf(stderr, "usage: bench_fit STARS RESAMPLES DATA.csv\n");
    return 2;
  }
  const int n = std::atoi(argv[1]), resamples = std::atoi(argv[2]);
  keep_freed_memory_for_reuse();
  test::MockSample m = test::mock_parallax_sample(2026, n, 0.03);
  StarTable t = test::catalog_from_mock(m);
  std::ofstream csv(argv[3]);
  csv.precision(17);
  for (Eigen::Index i = 0; i < m.data.parallax.size(); ++i)
    csv << m.data.parallax.x[i] << "," << m.data.parallax.m0[i] << "," << m.data.parallax.var_m[i]
        << "," << m.data.plx[i] << "," << m.data.var_plx[i] << "\n";
  csv.close();
  FitOptions o;
  o.input_path = "bench";
  o.loss = LossKind::kHuber;
  o.loss_scale = 1.0;  // scipy's default f_scale
  o.scatter = ParamSpec{ParamMode::kFixed, m.truth.sigma, 0, false};
  RelationOptions r;
  r.name = r.band = "X";
  o.relations.push_back(r);
  auto clock = [] { return std::chrono::steady_clock::now(); };
  auto t0 = clock();
  FitResult base = run_fit(o, t);
  auto t1 = clock();
  o.bootstrap = resamples;
  FitResult boot = run_fit(o, t);
  auto t2 = clock();
  double fit_ms = std::chrono::duration<double, std::milli>(t1 - t0).count();
  double boot_ms = std::chrono::duration<double, std::milli>(t2 - t1).count() - fit_ms;
  const RelationResult& rr = base.relations[0];
  std::printf("rungcal_fit_ms %.4f\n", fit_ms);
  std::printf("rungcal_ms_per_resample %.5f\n", boot_ms / resamples);
  std::printf("rungcal_threads %u\n", std::thread::hardware_concurrency());
  std::printf("rungcal_params %.17g %.17g %.17g\n", rr.parameter("alpha"), rr.parameter("beta"),
              rr.parameter("parallax_offset_mas"));
  std::printf("rungcal_sigma %.17g\n", m.truth.sigma);
  std::printf("bootstrap_failed %d\n", boot.relations[0].bootstrap_failed);
  return 0;
}
