// SPDX-License-Identifier: MIT
// Times rungcal's joint bootstrap in the default joint configuration (the hierarchical joint
// likelihood of three relations: shared latent distance, per-relation sigma_int, scatter
// correlation rho free, shared E(B-V) errors, outlier and blend mixture, [Fe/H] errors
// marginalised, smooth-histogram distance prior) on a mock catalog, and writes the joint
// fit's inputs and full-sample optimum so bench/compare_joint_hierarchical.py can check and
// time an independent numpy/scipy version. bench_hierarchical times the single relation.
// Usage: bench_joint_hierarchical RESAMPLES DATA.csv [STARS]   (RESAMPLES: the joint bootstrap's)
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <memory>
#include <string>
#include <vector>

#include "hierarchical_bench.hpp"
#include "rungcal/core/log.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/plfit/joint_hierarchical.hpp"
#include "rungcal/simulate/mock_catalog.hpp"

using namespace rungcal;

int main(int argc, char** argv) {
  const auto args = bench::arguments(argc, argv, "bench_joint_hierarchical", 1000);
  if (!args) return 2;
  const int resamples = args->resamples;
  keep_freed_memory_for_reuse();
  // rungcal-study --joint 3 with the contaminations that act on the joint likelihood: V and I
  // are the study's V- and I-like truths.
  MockScenario scenario = bench::contaminated_scenario(args->stars);
  scenario.ebv_error = 0.04;
  scenario.more_relations = {{"V", -3.9, -2.4, -0.2, 0.20, 3.1},
                             {"I", -4.8, -2.9, -0.2, 0.14, 1.9}};
  scenario.scatter_correlation = 0.8;
  if (!bench::usable(scenario)) return 2;
  const StarTable catalog = mock_calibrator_catalog(scenario);
  const StarTable coefficients = mock_coefficients(scenario);

  FitOptions o;  // the defaults: hierarchical space, smooth histogram, outliers, rising blends
  o.input_path = "bench";
  o.threads = 1;  // per-core time
  o.joint = true;
  for (const char* name : {"X", "V", "I"}) {
    RelationOptions r;
    r.name = r.band = name;
    r.metallicity = true;
    o.relations.push_back(r);
  }

  const auto timing = bench::time_bootstrap(resamples, [&](int b) {
    o.joint_bootstrap = b;
    return run_fit(o, catalog, &coefficients);
  });
  const FitResult& base = timing.base;
  const FitResult& boot = timing.boot;

  const JointResult& jr = *base.joint;
  const JointLayout& L = jr.layout;
  const JointData& d = jr.data;
  const JointHierarchicalValue at_optimum =
      joint_hierarchical_value(d, jr.settings, L, jr.likelihood_optimum());
  const double fit_nll = 0.5 * jr.neg2_log_likelihood;
  if (!(std::abs(at_optimum.neg_log_likelihood - fit_nll) <= 1e-9 * std::abs(fit_nll))) {
    std::fprintf(
        stderr,
        "the joint result's settings give -ln L = %.17g, the fit's %.17g: not what it solved\n",
        at_optimum.neg_log_likelihood, fit_nll);
    return 1;
  }

  // One line per entry (a star in one relation), the star's own columns repeated.
  std::ofstream csv(args->csv);
  csv.precision(17);
  csv << "# star,relation,x,m0,var_phot,coefficient,plx,var_plx,var_ebv,feh,var_feh,kind\n";
  for (int i = 0; i < d.stars(); ++i) {
    const auto si = static_cast<std::size_t>(i);
    for (int e = d.first[si]; e < d.first[si + 1]; ++e) {
      const auto se = static_cast<std::size_t>(e);
      csv << i << "," << d.relation[se] << "," << d.x[se] << "," << d.m0[se] << ","
          << d.var_phot[se] << "," << d.coefficient[se] << "," << d.plx[si] << "," << d.var_plx[si]
          << "," << d.var_ebv[si] << "," << d.feh[si] << "," << d.var_feh[si] << ","
          << static_cast<int>(d.kind[si]) << "\n";
    }
  }
  csv.close();
  if (!csv) {
    std::fprintf(stderr, "cannot write %s\n", args->csv.c_str());
    return 1;
  }

  const HierarchicalSettings& h = jr.settings.hierarchical;
  std::printf("stars %d\n", d.stars());
  std::printf("entries %zu\n", d.relation.size());
  for (std::size_t r = 0; r < jr.relations.size(); ++r)
    std::printf("relation %zu %s\n", r, jr.relations[r].c_str());
  bench::print_timing(timing, resamples, o.threads);
  std::printf("bootstrap_failed %d\n", boot.joint->bootstrap_failed);
  std::printf("full_iterations %d\n", jr.solution.iterations);
  std::printf("full_termination %s\n", jr.solution.termination.c_str());
  std::printf("full_usable %d\n", jr.solution.usable ? 1 : 0);
  std::printf("neg_log_likelihood %.17g\n", at_optimum.neg_log_likelihood);
  std::printf("histogram_start %.17g\n", h.histogram_start);
  std::printf("histogram_alpha_ref %.17g\n", h.histogram_alpha_ref);
  std::printf("histogram_step %.17g\n", h.histogram_step);
  std::printf("histogram_bins %d\n", L.distance_bins + 1);
  std::printf("histogram_walk_sigma %.17g\n", h.histogram_walk_sigma);
  std::printf("histogram_kernel_fraction %.17g\n", h.histogram_kernel);
  std::printf("quadrature_nodes %d\n", h.quadrature_nodes);
  std::printf("blend_component %s\n", std::string(kBlendComponentNames.name(h.blends)).c_str());
  std::printf("blend_min_mag %.17g\n", h.blend_min_mag);
  std::printf("outlier_parallax_factor %.17g\n", h.outlier_parallax_factor);
  std::printf("outlier_parallax_law %s\n",
              std::string(kOutlierParallaxLawNames.name(h.outlier_parallax)).c_str());
  for (int j = 0; j < L.size; ++j) {
    const ParamSpec& p = jr.settings.params[static_cast<std::size_t>(j)];
    // name, value, mode, d(-ln L)/d(solver coordinate), and the prior's centre and width
    // (used only when the mode is "prior").
    std::printf("param %s %.17g %s %.17g %.17g %.17g\n",
                L.names[static_cast<std::size_t>(j)].c_str(), jr.likelihood_optimum()[j],
                std::string(kParamModeNames.name(p.mode)).c_str(), at_optimum.gradient[j], p.value,
                p.prior_sigma);
  }
  // Where the bootstrap's time goes: a few resamples solved here as run_joint_hierarchical
  // solves them (stars drawn with replacement, each drawn star once with its draws as its
  // weight, tolerances 1e-9 / 1e-8, the full sample's metric, start at the optimum; the
  // priors' centres not redrawn), and the cost of one evaluation of -ln L with its gradient.
  // Not part of the timing above.
  FitSettings relaxed = jr.settings;
  Eigen::MatrixXd covariance;
  std::vector<std::string> undetermined;
  std::shared_ptr<const Eigen::MatrixXd> metric;
  joint_hierarchical_covariance(d, jr.settings, L, jr.likelihood_optimum(), covariance,
                                undetermined, &metric);
  relaxed.preconditioner = metric;
  relaxed.function_tolerance = 1e-9;
  relaxed.parameter_tolerance = 1e-8;
  bench::print_direct_solves<int>(
      resamples, static_cast<std::size_t>(d.stars()),
      [&](const std::vector<int>& stars) { return d.take_counted(stars); },
      [&](const JointData& sample) {
        return solve_joint_hierarchical(sample, relaxed, L, jr.likelihood_optimum());
      },
      [&] { joint_hierarchical_value(d, jr.settings, L, jr.likelihood_optimum()); });
  const Eigen::MatrixXd& bs = boot.joint->bootstrap;
  for (const char* name : {"alpha_X", "alpha_V", "alpha_I", "sigma_int_V", "scatter_correlation",
                           "parallax_offset_mas"}) {
    const auto j = std::find(L.names.begin(), L.names.end(), name) - L.names.begin();
    double n = 0, sum = 0, sum2 = 0;
    for (Eigen::Index b = 0; b < bs.rows(); ++b)
      if (std::isfinite(bs(b, j))) n += 1, sum += bs(b, j), sum2 += bs(b, j) * bs(b, j);
    const double sd = n > 1 ? std::sqrt(std::max(sum2 - sum * sum / n, 0.0) / (n - 1))
                            : std::numeric_limits<double>::quiet_NaN();
    std::printf("bootstrap_error %s %.6g\n", name, sd);
  }
  return 0;
}
