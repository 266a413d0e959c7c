// SPDX-License-Identifier: MIT
// rungcal-study: how the fit does on many mock catalogs with a known truth.
#include <iostream>

#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/stage_main.hpp"
#include "rungcal/simulate/study.hpp"
#include "rungcal/simulate/study_paired.hpp"
#include "rungcal/simulate/study_pool.hpp"
#include "rungcal/simulate/study_setup.hpp"

namespace {

rungcal::StudyResult run_mocks(rungcal::StudyOptions study, const rungcal::StudyChoices& choice,
                               const CLI::App& app) {
  rungcal::apply_study_choices(choice, study);
  rungcal::throw_if_invalid(rungcal::with_study_option_name(study.check()), "(command line)");
  const auto level = spdlog::get_level();
  spdlog::set_level(spdlog::level::err);  // every mock's own warnings would bury the table
  rungcal::StudyResult result = rungcal::run_study(study);
  spdlog::set_level(level);
  // What runs must share to be pooled: every setting but the mocks drawn and how.
  result.header["setup"] = rungcal::command_line_settings(
      app, {"mocks", "seed", "threads", "out", "combine", "quiet", "verbose", "log-file"});
  return result;
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app{
      "Fits many mock calibrator catalogs of one scenario, as a user would, and prints per "
      "parameter "
      "the bias in units of the reported error and the coverage of the 68% intervals."};
  rungcal::CommonOptions common;
  rungcal::StudyOptions study;
  rungcal::StudyChoices choice;
  choice.blend_component =
      rungcal::kBlendComponentNames.name(rungcal::HierarchicalSettings{}.blends);
  std::string out;
  std::vector<std::string> combine, paired;
  app.add_option("--mocks", study.mocks, "Mock catalogs to draw and fit")->capture_default_str();
  app.add_option("--stars", study.scenario.stars, "Calibrators per mock")->capture_default_str();
  app.add_option("--relation", choice.relation,
                 "wesenheit (sigma_int 0.08) or optical (0.20, E(B-V) errors count)")
      ->capture_default_str();
  app.add_option("--distances", choice.distances, "disk, flat_modulus or clumpy")
      ->capture_default_str();
  app.add_option("--contaminations", choice.contaminations,
                 "all, none, or a comma list of blends, parallax_outliers, feh_errors, overtones, "
                 "far_stars, ebv_errors")
      ->capture_default_str();
  app.add_option("--blend-law", choice.blend_law,
                 "how much brighter the mock blends are: moderate (0.3-1.0 mag), "
                 "faint_companions (0-1.0 mag), bright_companions (0.44-1.75 mag) or fit_component "
                 "(the fit's own: 0.3 mag plus Gamma(2, mean 0.5))")
      ->capture_default_str();
  app.add_option("--outlier-law", choice.outlier_law,
                 "how the mocks' gross parallax outliers are drawn: shifted (+-5-20 errors), "
                 "quartic_component (the fit's default outlier component: +-chi(5) x 6 errors, "
                 "magnitude a member's), gaussian_component (its Gaussian one: parallax error "
                 "x10, magnitude +-1 mag; fit it with --outlier-parallax-law gaussian "
                 "--hold-outlier-factor --outlier-parallax-factor 10) or underestimated_error "
                 "(parallax error x U(5, 20), magnitude a member's)")
      ->capture_default_str();
  app.add_option("--parallax-error-scale", study.scenario.parallax_error_scale,
                 "multiplies the mocks' parallax errors (3: a median S/N near 5 on the disk)")
      ->capture_default_str();
  app.add_option("--space", choice.space, "the fit's space: hierarchical, parallax, magnitude, abl")
      ->capture_default_str();
  app.add_option("--distance-prior", choice.distance_prior,
                 "the hierarchical fit's distance prior: smooth_histogram, space_density, "
                 "generalized_gamma")
      ->capture_default_str();
  app.add_option("--histogram-smoothing", study.fit.hierarchical.histogram_walk_sigma,
                 "random-walk step of the smooth histogram's log-weights")
      ->capture_default_str();
  app.add_option("--histogram-step", study.fit.hierarchical.histogram_step,
                 "the smooth histogram's bin step (mag)")
      ->capture_default_str();
  app.add_option("--histogram-kernel", study.fit.hierarchical.histogram_kernel,
                 "the smooth histogram's kernel width as a fraction of its step (0.75-1)")
      ->capture_default_str();
  app.add_option("--histogram-margin", study.fit.hierarchical.histogram_margin,
                 "its grid beyond the data (mag)")
      ->capture_default_str();
  app.add_option("--quadrature-nodes", study.fit.hierarchical.quadrature_nodes,
                 "Gauss-Hermite nodes")
      ->capture_default_str();
  app.add_option("--outlier-shift", study.fit.outlier_shift.value,
                 "outlier component brighter by this (mag)")
      ->capture_default_str();
  app.add_option("--outlier-width", study.fit.outlier_width.value,
                 "outlier component's extra width (mag)")
      ->capture_default_str();
  app.add_option(
      "--outlier-parallax-law", choice.outlier_parallax_law,
      "outlier component's parallax law: gaussian, rising or quartic (default: the fit's)");
  app.add_option("--scatter-correction", choice.scatter_correction,
                 "the scatters' estimate: restricted (maximum likelihood with the location "
                 "parameters integrated out) or none (maximum likelihood; default: the fit's)");
  app.add_option("--outlier-parallax-factor", study.fit.outlier_factor.value,
                 "outlier component's parallax scale over the error (its start; the value held "
                 "with --hold-outlier-factor)")
      ->capture_default_str();
  app.add_flag("--hold-outlier-factor", choice.hold_outlier_factor,
               "hold the outlier component's parallax factor at --outlier-parallax-factor (the "
               "fit frees it by default)");
  app.add_flag("--fit-outlier-shape", choice.free_outlier_shape,
               "fit the outlier component's shift and width (under the quartic and rising "
               "parallax laws they shape only stars of given distance, and are held without "
               "them)");
  app.add_option("--blend-component", choice.blend_component,
                 "the hierarchical fit's blend component: none, exponential or rising")
      ->capture_default_str();
  app.add_option("--blend-scale", study.fit.blend_scale.value,
                 "blends' mean brightening: start, fixed value or prior centre (mag)")
      ->capture_default_str();
  app.add_option("--blend-scale-prior", choice.blend_scale_prior,
                 "> 0: a Gaussian prior of this width on the blend scale (mag)")
      ->capture_default_str();
  app.add_flag("--fix-blend-scale", choice.fix_blend_scale,
               "hold the blend scale at --blend-scale");
  app.add_option("--blend-min-mag", study.fit.hierarchical.blend_min_mag,
                 "blends start this much brighter (mag)")
      ->capture_default_str();
  app.add_option("--metallicity", choice.metallicity,
                 "fit the [Fe/H] term (the truth has gamma = -0.2)")
      ->capture_default_str();
  app.add_option("--joint", choice.joint,
                 "fit X and the first n - 1 of V, I, K jointly (0: X alone)")
      ->capture_default_str();
  app.add_option("--scatter-correlation", study.scenario.scatter_correlation,
                 "the mocks' correlation of a star's scatter between relations (joint)")
      ->capture_default_str();
  app.add_flag("--fix-scatter-correlation", choice.fix_scatter_correlation,
               "hold the joint fit's correlation at the truth");
  app.add_flag("--grey-blend-model", choice.grey_blend_model,
               "hold the joint fit's blend ratios at 1 (the model's blends grey)");
  app.add_option("--clusters", study.scenario.clusters,
                 "clusters per mock, each fitted with its cluster parallax")
      ->capture_default_str();
  app.add_option("--cluster-members", study.scenario.cluster_members, "stars per cluster")
      ->capture_default_str();
  app.add_option("--cluster-parallax-error", study.scenario.cluster_parallax_error_mas,
                 "the clusters' parallax error (mas)")
      ->capture_default_str();
  app.add_option("--anchors", study.scenario.anchors,
                 "anchor galaxies per mock, each fitted with its published modulus as a prior")
      ->capture_default_str();
  app.add_option("--anchor-members", study.scenario.anchor_members, "stars per anchor galaxy")
      ->capture_default_str();
  app.add_option("--anchor-mu-error", study.scenario.anchor_mu_error,
                 "the published anchor moduli's standard error (mag)")
      ->capture_default_str();
  app.add_option("--anchor-correlation", study.scenario.anchor_correlation,
                 "the correlation of the published anchor moduli's errors (given to the fit as "
                 "anchor_covariance)")
      ->capture_default_str();
  app.add_flag("--independent-anchor-priors", choice.independent_anchor_priors,
               "fit the anchors' moduli with independent priors, ignoring their correlation");
  app.add_option("--red-companions", choice.red_companions,
                 "joint mocks: blends' companion flux ratio in K is this times X's and in V 1/this "
                 "(1: grey)")
      ->check(CLI::PositiveNumber)
      ->capture_default_str();
  app.add_option("--bootstrap", choice.bootstrap, "Bootstrap resamples per mock (0: none)")
      ->capture_default_str();
  app.add_option("--seed", choice.seed, "Seed of the first mock")->capture_default_str();
  app.add_option("--threads", study.threads, "Mocks fitted at once (0: all cores)")
      ->capture_default_str();
  app.add_option("--out", out, "Also write the summary and every mock's figures as JSON here");
  app.add_option(
      "--combine", combine,
      "Fit nothing: pool earlier runs' --out files (one setup, distinct seeds) and print "
      "the table over all their mocks");
  app.add_option(
         "--paired", paired,
         "Fit nothing: A.json B.json, two --out files of the same scenario on the same seeds "
         "but one change; print what the change does, mock by mock")
      ->expected(2)
      ->excludes("--combine");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("study", common.verbosity(), common.log_file);

  return rungcal::run_stage("study", [&] {
    if (!paired.empty()) {
      const rungcal::PairedStudy p = rungcal::pair_studies(paired[0], paired[1]);
      std::cout << rungcal::paired_table(p);
      if (!out.empty()) rungcal::write_file_atomically(out, p.to_json().dump(2) + "\n");
      return rungcal::ExitCode::kSuccess;
    }
    const rungcal::StudyResult result =
        combine.empty() ? run_mocks(study, choice, app) : rungcal::combine_studies(combine);
    std::cout << rungcal::study_table(result);
    if (!out.empty()) rungcal::write_file_atomically(out, result.to_json().dump(2) + "\n");
    return rungcal::ExitCode::kSuccess;
  });
}
