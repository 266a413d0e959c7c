// SPDX-License-Identifier: MIT
// Times rungcal's bootstrap in the default fit configuration (the hierarchical likelihood:
// smooth-histogram distance prior, outlier and rising-blend mixture, sigma_int free, [Fe/H]
// errors marginalised) on a mock catalog, and writes the fit's inputs and full-sample optimum so
// bench/compare_hierarchical.py can check and time an independent numpy/scipy version.
// bench_fit keeps timing the parallax-space special case.
// Usage: bench_hierarchical RESAMPLES DATA.csv [STARS]
#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <string>

#include "hierarchical_bench.hpp"
#include "rungcal/core/log.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/simulate/mock_catalog.hpp"
#include "rungcal/table/catalog_schema.hpp"

using namespace rungcal;

namespace {

// The fit's inputs as select_calibrators builds them for this catalog: every mock star is a
// parallax calibrator, no zero point, no inflation, [Fe/H] errors from feh_err. The bench
// checks below that run_fit's likelihood at its optimum is reproduced from these arrays, so
// the CSV is what the fit saw.
FitData parallax_data(const StarTable& t, double pivot) {
  const auto n = static_cast<Eigen::Index>(t.rows());
  FitData d;
  FitData::Common& c = d.parallax;
  for (Eigen::ArrayXd* a : {&c.x, &c.xl, &c.feh, &c.var_feh, &c.m0, &c.var_m, &d.plx, &d.var_plx})
    a->resize(n);
  for (Eigen::Index i = 0; i < n; ++i) {
    const auto r = static_cast<std::size_t>(i);
    const double logp = fundamentalized_log_period(t.column(col::kClass).to_string(r),
                                                   t.column(col::kMode).to_string(r),
                                                   t.column(col::kLogPeriod).as_real(r));
    const double m_err = t.column("mag0_err_X").as_real(r),
                 plx_err = t.column(col::kParallaxErr).as_real(r);
    const double feh_err = t.column(col::kFehErr).as_real(r);
    c.x[i] = logp - pivot;
    c.xl[i] = 0.0;
    c.feh[i] = t.column(col::kFeh).as_real(r);
    c.var_feh[i] = feh_err > 0 ? feh_err * feh_err : 0.0;
    c.m0[i] = t.column("mag0_X").as_real(r);
    c.var_m[i] = m_err * m_err;
    d.plx[i] = t.column(col::kParallax).as_real(r);
    d.var_plx[i] = plx_err * plx_err;
    c.row.push_back(r);
  }
  return d;
}

}  // namespace

int main(int argc, char** argv) {
  const auto args = bench::arguments(argc, argv, "bench_hierarchical", 3000);
  if (!args) return 2;
  const int resamples = args->resamples;
  keep_freed_memory_for_reuse();
  const MockScenario scenario = bench::contaminated_scenario(args->stars);
  if (!bench::usable(scenario)) return 2;
  const StarTable catalog = mock_calibrator_catalog(scenario);

  FitOptions o;  // the defaults: hierarchical space, smooth histogram, outliers, rising blends
  o.input_path = "bench";
  o.threads = 1;  // per-core time
  RelationOptions r;
  r.name = r.band = "X";
  r.metallicity = true;
  o.relations.push_back(r);

  const auto timing = bench::time_bootstrap(resamples, [&](int b) {
    o.bootstrap = b;
    return run_fit(o, catalog);
  });
  const FitResult& base = timing.base;
  const FitResult& boot = timing.boot;

  const RelationResult& rr = base.relations[0];
  const FitData data = parallax_data(catalog, r.pivot_log_period);
  if (data.parallax.size() != rr.n_used) {
    std::fprintf(stderr, "the fit used %d stars, the CSV holds %ld\n", rr.n_used,
                 static_cast<long>(data.parallax.size()));
    return 1;
  }
  const HierarchicalValue at_optimum =
      hierarchical_value(data, rr.settings, rr.layout, rr.likelihood_optimum());
  const double fit_nll = 0.5 * rr.neg2_log_likelihood;
  if (!(std::abs(at_optimum.neg_log_likelihood - fit_nll) <= 1e-9 * std::abs(fit_nll))) {
    std::fprintf(
        stderr, "the CSV's arrays give -ln L = %.17g, the fit's data %.17g: not the fit's inputs\n",
        at_optimum.neg_log_likelihood, fit_nll);
    return 1;
  }

  std::ofstream csv(args->csv);
  csv.precision(17);
  csv << "# x,m0,var_m,plx,var_plx,feh,var_feh\n";
  for (Eigen::Index i = 0; i < data.parallax.size(); ++i)
    csv << data.parallax.x[i] << "," << data.parallax.m0[i] << "," << data.parallax.var_m[i] << ","
        << data.plx[i] << "," << data.var_plx[i] << "," << data.parallax.feh[i] << ","
        << data.parallax.var_feh[i] << "\n";
  csv.close();
  if (!csv) {
    std::fprintf(stderr, "cannot write %s\n", args->csv.c_str());
    return 1;
  }

  const HierarchicalSettings& h = rr.settings.hierarchical;
  std::printf("stars %ld\n", static_cast<long>(data.parallax.size()));
  bench::print_timing(timing, resamples, o.threads);
  std::printf("bootstrap_failed %d\n", boot.relations[0].bootstrap_failed);
  std::printf("full_iterations %d\n", rr.solution.iterations);
  std::printf("full_termination %s\n", rr.solution.termination.c_str());
  std::printf("full_usable %d\n", rr.solution.usable ? 1 : 0);
  std::printf("neg_log_likelihood %.17g\n", at_optimum.neg_log_likelihood);
  std::printf("histogram_start %.17g\n", h.histogram_start);
  std::printf("histogram_alpha_ref %.17g\n", h.histogram_alpha_ref);
  std::printf("histogram_step %.17g\n", h.histogram_step);
  std::printf("histogram_bins %d\n", rr.layout.distance_bins + 1);
  std::printf("histogram_walk_sigma %.17g\n", h.histogram_walk_sigma);
  std::printf("histogram_kernel_fraction %.17g\n", h.histogram_kernel);
  std::printf("quadrature_nodes %d\n", h.quadrature_nodes);
  std::printf("outlier_mag_width %.17g\n", h.outlier_mag_width);
  std::printf("outlier_mag_shift %.17g\n", h.outlier_mag_shift);
  std::printf("outlier_parallax_factor %.17g\n", h.outlier_parallax_factor);
  std::printf("outlier_parallax_law %s\n",
              std::string(kOutlierParallaxLawNames.name(h.outlier_parallax)).c_str());
  std::printf("blend_component %s\n", std::string(kBlendComponentNames.name(h.blends)).c_str());
  std::printf("blend_min_mag %.17g\n", h.blend_min_mag);
  std::printf("pivot_log_period %.17g\n", rr.settings.terms.pivot_log_period);
  for (int j = 0; j < rr.layout.size; ++j) {
    const ParamSpec& p = rr.settings.params[static_cast<std::size_t>(j)];
    // name, value, mode, d(-ln L)/d(solver coordinate), and the prior's centre and width
    // (used only when the mode is "prior": blend_scale_mag's by default).
    std::printf("param %s %.17g %s %.17g %.17g %.17g\n",
                rr.layout.names[static_cast<std::size_t>(j)].c_str(), rr.likelihood_optimum()[j],
                std::string(kParamModeNames.name(p.mode)).c_str(), at_optimum.gradient[j], p.value,
                p.prior_sigma);
  }
  // Where the bootstrap's time goes: a few resamples solved here as run_bootstrap solves
  // them (fit_stage.cpp: rows drawn with replacement, tolerances 1e-9 / 1e-8, start at the
  // optimum), and the cost of one evaluation of -ln L with its gradient. Not part of the
  // timing above.
  FitSettings relaxed = rr.settings;
  relaxed.function_tolerance = 1e-9;
  relaxed.parameter_tolerance = 1e-8;
  bench::print_direct_solves<Eigen::Index>(
      resamples, static_cast<std::size_t>(data.parallax.size()),
      [&](const std::vector<Eigen::Index>& idx) { return data.take(idx, {}, {}); },
      [&](const FitData& sample) {
        return solve_fit(sample, relaxed, rr.layout, rr.likelihood_optimum());
      },
      [&] { hierarchical_value(data, rr.settings, rr.layout, rr.likelihood_optimum()); });
  for (const char* name : {"alpha", "beta", "gamma", "parallax_offset_mas", "sigma_int"})
    std::printf("bootstrap_error %s %.6g\n", name, boot.relations[0].bootstrap_error(name));
  return 0;
}
