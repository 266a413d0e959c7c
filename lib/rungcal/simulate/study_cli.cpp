// SPDX-License-Identifier: MIT
#include "rungcal/simulate/study_cli.hpp"

#include <iostream>

#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/stage_main.hpp"
#include "rungcal/simulate/study_paired.hpp"
#include "rungcal/simulate/study_pool.hpp"

namespace rungcal {
namespace {

StudyResult run_mocks(StudyOptions study, const StudyChoices& choice, const CLI::App& app) {
  apply_study_choices(choice, study);
  throw_if_invalid(with_study_option_name(study.check()), "(command line)");
  const auto level = spdlog::get_level();
  spdlog::set_level(spdlog::level::err);  // every mock's own warnings would bury the table
  StudyResult result = run_study(study);
  spdlog::set_level(level);
  // What runs must share to be pooled: every setting but the mocks drawn and how.
  result.header["setup"] = command_line_settings(app, {"mocks", "seed", "threads", "out", "combine",
                                                       "paired", "quiet", "verbose", "log-file"});
  return result;
}

}  // namespace

void add_study_options(CLI::App& app, StudyCommandLine& line) {
  line.choice.blend_component = kBlendComponentNames.name(HierarchicalSettings{}.blends);
  app.add_option("--mocks", line.study.mocks, "Mock catalogs to draw and fit")
      ->capture_default_str();
  app.add_option("--stars", line.study.scenario.stars, "Calibrators per mock")
      ->capture_default_str();
  app.add_option("--relation", line.choice.relation,
                 "wesenheit (sigma_int 0.08) or optical (0.20, E(B-V) errors count)")
      ->capture_default_str();
  app.add_option("--distances", line.choice.distances, "disk, flat_modulus or clumpy")
      ->capture_default_str();
  app.add_option("--contaminations", line.choice.contaminations,
                 "all, none, or a comma list of blends, parallax_outliers, feh_errors, overtones, "
                 "far_stars, ebv_errors")
      ->capture_default_str();
  app.add_option("--blend-law", line.choice.blend_law,
                 "how much brighter the mock blends are: moderate (0.3-1.0 mag), "
                 "faint_companions (0-1.0 mag), bright_companions (0.44-1.75 mag) or fit_component "
                 "(the fit's own: 0.3 mag plus Gamma(2, mean 0.5))")
      ->capture_default_str();
  app.add_option("--outlier-law", line.choice.outlier_law,
                 "how the mocks' gross parallax outliers are drawn: shifted (+-5-20 errors), "
                 "quartic_component (the fit's default outlier component: +-chi(5) x 6 errors, "
                 "magnitude a member's), gaussian_component (its Gaussian one: parallax error "
                 "x10, magnitude +-1 mag; fit it with --outlier-parallax-law gaussian "
                 "--hold-outlier-factor --outlier-parallax-factor 10) or underestimated_error "
                 "(parallax error x U(5, 20), magnitude a member's)")
      ->capture_default_str();
  app.add_option("--parallax-error-scale", line.study.scenario.parallax_error_scale,
                 "multiplies the mocks' parallax errors (3: a median S/N near 5 on the disk)")
      ->capture_default_str();
  app.add_option("--space", line.choice.space,
                 "the fit's space: hierarchical, parallax, magnitude, abl")
      ->capture_default_str();
  app.add_option("--distance-prior", line.choice.distance_prior,
                 "the hierarchical fit's distance prior: smooth_histogram, space_density, "
                 "generalized_gamma")
      ->capture_default_str();
  app.add_option("--histogram-smoothing", line.study.fit.hierarchical.histogram_walk_sigma,
                 "random-walk step of the smooth histogram's log-weights")
      ->capture_default_str();
  app.add_option("--histogram-step", line.study.fit.hierarchical.histogram_step,
                 "the smooth histogram's bin step (mag)")
      ->capture_default_str();
  app.add_option("--histogram-kernel", line.study.fit.hierarchical.histogram_kernel,
                 "the smooth histogram's kernel width as a fraction of its step (0.75-1)")
      ->capture_default_str();
  app.add_option("--histogram-margin", line.study.fit.hierarchical.histogram_margin,
                 "its grid beyond the data (mag)")
      ->capture_default_str();
  app.add_option("--quadrature-nodes", line.study.fit.hierarchical.quadrature_nodes,
                 "Gauss-Hermite nodes")
      ->capture_default_str();
  app.add_option("--outlier-shift", line.study.fit.outlier_shift.value,
                 "outlier component brighter by this (mag)")
      ->capture_default_str();
  app.add_option("--outlier-width", line.study.fit.outlier_width.value,
                 "outlier component's extra width (mag)")
      ->capture_default_str();
  app.add_option(
      "--outlier-parallax-law", line.choice.outlier_parallax_law,
      "outlier component's parallax law: gaussian, rising or quartic (default: the fit's)");
  app.add_option("--scatter-correction", line.choice.scatter_correction,
                 "the scatters' estimate: restricted (maximum likelihood with the location "
                 "parameters integrated out) or none (maximum likelihood; default: the fit's)");
  app.add_option("--covariance", line.choice.covariance,
                 "the reported errors: hessian (the inverse Hessian) or sandwich (over the "
                 "stars; default: the fit's)");
  app.add_option("--outlier-parallax-factor", line.study.fit.outlier_factor.value,
                 "outlier component's parallax scale over the error (its start; the value held "
                 "with --hold-outlier-factor)")
      ->capture_default_str();
  app.add_flag("--hold-outlier-factor", line.choice.hold_outlier_factor,
               "hold the outlier component's parallax factor at --outlier-parallax-factor (the "
               "fit frees it by default)");
  app.add_flag("--fit-outlier-shape", line.choice.free_outlier_shape,
               "fit the outlier component's shift and width (under the quartic and rising "
               "parallax laws they shape only stars of given distance, and are held without "
               "them)");
  app.add_option("--blend-component", line.choice.blend_component,
                 "the hierarchical fit's blend component: none, exponential or rising")
      ->capture_default_str();
  app.add_option("--blend-scale", line.study.fit.blend_scale.value,
                 "blends' mean brightening: start, fixed value or prior centre (mag)")
      ->capture_default_str();
  app.add_option("--blend-scale-prior", line.choice.blend_scale_prior,
                 "> 0: a Gaussian prior of this width on the blend scale (mag)")
      ->capture_default_str();
  app.add_flag("--fix-blend-scale", line.choice.fix_blend_scale,
               "hold the blend scale at --blend-scale");
  app.add_option("--blend-min-mag", line.study.fit.hierarchical.blend_min_mag,
                 "blends start this much brighter (mag)")
      ->capture_default_str();
  app.add_option("--metallicity", line.choice.metallicity,
                 "fit the [Fe/H] term (the truth has gamma = -0.2)")
      ->capture_default_str();
  app.add_option("--joint", line.choice.joint,
                 "fit X and the first n - 1 of V, I, K jointly (0: X alone)")
      ->capture_default_str();
  app.add_option("--scatter-correlation", line.study.scenario.scatter_correlation,
                 "the mocks' correlation of a star's scatter between relations (joint)")
      ->capture_default_str();
  app.add_flag("--fix-scatter-correlation", line.choice.fix_scatter_correlation,
               "hold the joint fit's correlation at the truth");
  app.add_flag("--grey-blend-model", line.choice.grey_blend_model,
               "hold the joint fit's blend ratios at 1 (the model's blends grey)");
  app.add_option("--clusters", line.study.scenario.clusters,
                 "clusters per mock, each fitted with its cluster parallax")
      ->capture_default_str();
  app.add_option("--cluster-members", line.study.scenario.cluster_members, "stars per cluster")
      ->capture_default_str();
  app.add_option("--cluster-parallax-error", line.study.scenario.cluster_parallax_error_mas,
                 "the clusters' parallax error (mas)")
      ->capture_default_str();
  app.add_option("--anchors", line.study.scenario.anchors,
                 "anchor galaxies per mock, each fitted with its published modulus as a prior")
      ->capture_default_str();
  app.add_option("--anchor-members", line.study.scenario.anchor_members, "stars per anchor galaxy")
      ->capture_default_str();
  app.add_option("--anchor-mu-error", line.study.scenario.anchor_mu_error,
                 "the published anchor moduli's standard error (mag)")
      ->capture_default_str();
  app.add_option("--anchor-correlation", line.study.scenario.anchor_correlation,
                 "the correlation of the published anchor moduli's errors (given to the fit as "
                 "anchor_covariance)")
      ->capture_default_str();
  app.add_flag("--independent-anchor-priors", line.choice.independent_anchor_priors,
               "fit the anchors' moduli with independent priors, ignoring their correlation");
  app.add_option("--red-companions", line.choice.red_companions,
                 "joint mocks: blends' companion flux ratio in K is this times X's and in V 1/this "
                 "(1: grey)")
      ->check(CLI::PositiveNumber)
      ->capture_default_str();
  app.add_option("--bootstrap", line.choice.bootstrap, "Bootstrap resamples per mock (0: none)")
      ->capture_default_str();
  app.add_option("--seed", line.choice.seed, "Seed of the first mock")->capture_default_str();
  app.add_option("--threads", line.study.threads, "Mocks fitted at once (0: all cores)")
      ->capture_default_str();
  app.add_option("--out", line.out, "Also write the summary and every mock's figures as JSON here");
  app.add_option(
      "--combine", line.combine,
      "Fit nothing: pool earlier runs' --out files (one setup, distinct seeds) and print "
      "the table over all their mocks");
  app.add_option(
         "--paired", line.paired,
         "Fit nothing: A.json B.json, two --out files of the same scenario on the same seeds "
         "but one change; print what the change does, mock by mock")
      ->expected(2)
      ->excludes("--combine");
}

ExitCode run_study_command(const StudyCommandLine& line, const CLI::App& app) {
  if (!line.paired.empty()) {
    const PairedStudy p = pair_studies(line.paired[0], line.paired[1]);
    std::cout << paired_table(p);
    if (!line.out.empty()) write_file_atomically(line.out, p.to_json().dump(2) + "\n");
    return ExitCode::kSuccess;
  }
  const StudyResult result = line.combine.empty() ? run_mocks(line.study, line.choice, app)
                                                  : combine_studies(line.combine);
  std::cout << study_table(result);
  if (!line.out.empty()) write_file_atomically(line.out, result.to_json().dump(2) + "\n");
  return ExitCode::kSuccess;
}

}  // namespace rungcal
