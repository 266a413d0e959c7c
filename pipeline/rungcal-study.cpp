// SPDX-License-Identifier: MIT
// rungcal-study: how the fit does on many mock catalogs with a known truth.
#include <fstream>
#include <iostream>
#include <sstream>

#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/stage_main.hpp"
#include "rungcal/simulate/study.hpp"

namespace {

// The two kinds of relation the acceptance study asks for (method brief, section 4b).
void apply_relation_preset(const std::string& name, rungcal::MockScenario& s) {
  if (name == "wesenheit") {
    s.sigma_int = 0.08, s.extinction_per_ebv = 0.0, s.alpha = -5.9, s.beta = -3.3;
  } else if (name == "optical") {
    s.sigma_int = 0.20, s.extinction_per_ebv = 3.1, s.alpha = -3.9, s.beta = -2.4;
  } else {
    throw rungcal::InputError({"--relation", {}, {}}, "config_value",
                              "'" + name + "' is not one of: wesenheit, optical");
  }
}

// The joint study's further relations of the same stars (invented truths of V-, I- and
// K-like bands, for simulations only), the first n - 1 of them.
std::vector<rungcal::MockRelation> joint_relations(int n) {
  const std::vector<rungcal::MockRelation> all = {{"V", -3.9, -2.4, -0.2, 0.20, 3.1},
                                                  {"I", -4.8, -2.9, -0.2, 0.14, 1.9},
                                                  {"K", -5.7, -3.2, -0.2, 0.09, 0.35}};
  if (n < 0 || n == 1 || n > 4)
    throw rungcal::InputError({"--joint", {}, {}}, "config_value",
                              "must be 0 (one relation) or 2 to 4");
  return {all.begin(), all.begin() + std::max(0, n - 1)};
}

void apply_contaminations(const std::string& list, rungcal::MockScenario& s) {
  std::stringstream in(list);
  std::string item;
  while (std::getline(in, item, ',')) {
    if (item == "none" || item.empty()) continue;
    const bool all = item == "all";
    bool known = all;
    auto on = [&](const char* key, double& field, double value) {
      if (all || item == key) field = value, known = true;
    };
    on("blends", s.blend_fraction, 0.03);
    on("parallax_outliers", s.parallax_outlier_fraction, 0.03);
    on("feh_errors", s.feh_error, 0.08);
    on("overtones", s.overtone_fraction, 0.15);
    on("far_stars", s.far_fraction, 0.08);
    on("ebv_errors", s.ebv_error, 0.04);
    if (!known)
      throw rungcal::InputError(
          {"--contaminations", {}, {}}, "config_value",
          "'" + item +
              "' is not one of: all, none, blends, parallax_outliers, feh_errors, "
              "overtones, far_stars, ebv_errors");
  }
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app{
      "Fits many mock calibrator catalogs of one scenario, as a user would, and prints per "
      "parameter "
      "the bias in units of the reported error and the coverage of the 68% intervals."};
  rungcal::CommonOptions common;
  rungcal::StudyOptions study;
  std::string relation = "wesenheit", distances = "disk", contaminations = "all",
              space = "hierarchical", out, prior = "smooth_histogram";
  bool metallicity = true;
  int bootstrap = 0, joint = 0;
  double red_companions = 1.0;  // --red-companions
  long long seed = 1;
  app.add_option("--mocks", study.mocks, "Mock catalogs to draw and fit")->capture_default_str();
  app.add_option("--stars", study.scenario.stars, "Calibrators per mock")->capture_default_str();
  app.add_option("--relation", relation,
                 "wesenheit (sigma_int 0.08) or optical (0.20, E(B-V) errors count)")
      ->capture_default_str();
  app.add_option("--distances", distances, "disk, flat_modulus or clumpy")->capture_default_str();
  app.add_option("--contaminations", contaminations,
                 "all, none, or a comma list of blends, parallax_outliers, feh_errors, overtones, "
                 "far_stars, ebv_errors")
      ->capture_default_str();
  std::string blend_law = "moderate";
  app.add_option("--blend-law", blend_law,
                 "how much brighter the mock blends are: moderate (0.3-1.0 mag), "
                 "faint_companions (0-1.0 mag) or bright_companions (0.44-1.75 mag)")
      ->capture_default_str();
  app.add_option("--parallax-error-scale", study.scenario.parallax_error_scale,
                 "multiplies the mocks' parallax errors (3: a median S/N near 5 on the disk)")
      ->capture_default_str();
  app.add_option("--space", space, "the fit's space: hierarchical, parallax, magnitude, abl")
      ->capture_default_str();
  app.add_option("--distance-prior", prior,
                 "the hierarchical fit's distance prior: smooth_histogram, space_density, "
                 "generalized_gamma")
      ->capture_default_str();
  app.add_option("--histogram-smoothing", study.fit.hierarchical.histogram_walk_sigma,
                 "random-walk step of the smooth histogram's log-weights")
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
  bool free_outlier_shape = false, fix_correlation = false, grey_blend_model = false,
       independent_anchors = false;
  app.add_flag("--fit-outlier-shape", free_outlier_shape,
               "fit the outlier component's shift and width");
  std::string blend_component(
      rungcal::kBlendComponentNames.name(rungcal::HierarchicalSettings{}.blends));
  double blend_scale_prior = 0;
  bool fix_blend_scale = false;
  app.add_option("--blend-component", blend_component,
                 "the hierarchical fit's blend component: none, exponential or rising")
      ->capture_default_str();
  app.add_option("--blend-scale", study.fit.blend_scale.value,
                 "blends' mean brightening: start, fixed value or prior centre (mag)")
      ->capture_default_str();
  app.add_option("--blend-scale-prior", blend_scale_prior,
                 "> 0: a Gaussian prior of this width on the blend scale (mag)")
      ->capture_default_str();
  app.add_flag("--fix-blend-scale", fix_blend_scale, "hold the blend scale at --blend-scale");
  app.add_option("--blend-min-mag", study.fit.hierarchical.blend_min_mag,
                 "blends start this much brighter (mag)")
      ->capture_default_str();
  app.add_option("--metallicity", metallicity, "fit the [Fe/H] term (the truth has gamma = -0.2)")
      ->capture_default_str();
  app.add_option("--joint", joint, "fit X and the first n - 1 of V, I, K jointly (0: X alone)")
      ->capture_default_str();
  app.add_option("--scatter-correlation", study.scenario.scatter_correlation,
                 "the mocks' correlation of a star's scatter between relations (joint)")
      ->capture_default_str();
  app.add_flag("--fix-scatter-correlation", fix_correlation,
               "hold the joint fit's correlation at the truth");
  app.add_flag("--grey-blend-model", grey_blend_model,
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
  app.add_flag("--independent-anchor-priors", independent_anchors,
               "fit the anchors' moduli with independent priors, ignoring their correlation");
  app.add_option("--red-companions", red_companions,
                 "joint mocks: blends' companion flux ratio in K is this times X's and in V 1/this "
                 "(1: grey)")
      ->check(CLI::PositiveNumber)
      ->capture_default_str();
  app.add_option("--bootstrap", bootstrap, "Bootstrap resamples per mock (0: none)")
      ->capture_default_str();
  app.add_option("--seed", seed, "Seed of the first mock")->capture_default_str();
  app.add_option("--threads", study.threads, "Mocks fitted at once (0: all cores)")
      ->capture_default_str();
  app.add_option("--out", out, "Also write the summary as JSON here");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("study", common.verbosity(), common.log_file);

  return rungcal::run_stage("study", [&] {
    apply_relation_preset(relation, study.scenario);
    apply_contaminations(contaminations, study.scenario);
    study.scenario.seed = static_cast<std::uint64_t>(seed);
    auto d = rungcal::kMockDistanceNames.parse(distances);
    if (!d)
      throw rungcal::InputError(
          {"--distances", {}, {}}, "config_value",
          "'" + distances + "' is not one of: " + rungcal::kMockDistanceNames.choices());
    study.scenario.distances = *d;
    auto law = rungcal::kMockBlendLawNames.parse(blend_law);
    if (!law)
      throw rungcal::InputError(
          {"--blend-law", {}, {}}, "config_value",
          "'" + blend_law + "' is not one of: " + rungcal::kMockBlendLawNames.choices());
    study.scenario.blend_law = *law;
    auto sp = rungcal::kFitSpaceNames.parse(space);
    if (!sp)
      throw rungcal::InputError(
          {"--space", {}, {}}, "config_value",
          "'" + space + "' is not one of: " + rungcal::kFitSpaceNames.choices());
    study.fit.space = *sp;
    auto family = rungcal::kDistancePriorNames.parse(prior);
    if (!family)
      throw rungcal::InputError(
          {"--distance-prior", {}, {}}, "config_value",
          "'" + prior + "' is not one of: " + rungcal::kDistancePriorNames.choices());
    study.fit.hierarchical.prior = *family;
    if (*sp != rungcal::FitSpace::kHierarchical)
      study.fit.loss = rungcal::LossKind::kHuber;  // that space's documented default
    study.fit.input_path = "(mock)";
    if (free_outlier_shape)
      study.fit.outlier_shift.mode = study.fit.outlier_width.mode = rungcal::ParamMode::kFree;
    auto blends = rungcal::kBlendComponentNames.parse(blend_component);
    if (!blends)
      throw rungcal::InputError(
          {"--blend-component", {}, {}}, "config_value",
          "'" + blend_component + "' is not one of: " + rungcal::kBlendComponentNames.choices());
    study.fit.hierarchical.blends = *blends;
    if (blend_scale_prior > 0)
      study.fit.blend_scale.mode = rungcal::ParamMode::kPrior,
      study.fit.blend_scale.prior_sigma = blend_scale_prior;
    if (fix_blend_scale) study.fit.blend_scale.mode = rungcal::ParamMode::kFixed;
    study.fit.bootstrap = bootstrap;
    rungcal::RelationOptions rel;
    rel.name = rel.band = "X";
    rel.metallicity = metallicity;
    study.fit.relations = {rel};
    if (!metallicity) study.parameters = {"alpha", "beta", "parallax_offset_mas", "sigma_int"};
    study.scenario.more_relations = joint_relations(joint);
    // A red companion: its flux ratio 1/r times X's in V and r times in K (I as X).
    for (auto& r : study.scenario.more_relations)
      r.companion_colour =
          r.name == "V" ? 1.0 / red_companions : (r.name == "K" ? red_companions : 1.0);
    if (joint > 0) {
      study.fit.joint = true;
      study.parameters.clear();
      for (const auto& r : study.scenario.more_relations) {
        rungcal::RelationOptions more = rel;
        more.name = more.band = r.name;
        study.fit.relations.push_back(more);
      }
      for (const auto& r : study.fit.relations)
        for (const char* p : {"alpha_", "beta_", "gamma_", "sigma_int_"})
          if (metallicity || std::string(p) != "gamma_") study.parameters.push_back(p + r.name);
      study.parameters.push_back("scatter_correlation");
      study.parameters.push_back("parallax_offset_mas");
      // The blend ratios: a true value only for grey companions (MockScenario::truth), the
      // mean estimate always.
      if (!grey_blend_model && study.fit.hierarchical.blends != rungcal::BlendComponent::kNone)
        for (const auto& r : study.scenario.more_relations)
          study.parameters.push_back("blend_ratio_" + r.name);
      study.fit.joint_scatter_correlation.value = study.scenario.scatter_correlation;
      if (fix_correlation) study.fit.joint_scatter_correlation.mode = rungcal::ParamMode::kFixed;
      if (grey_blend_model)
        study.fit.joint_blend_ratio = {rungcal::ParamMode::kFixed, 1.0, 0, true};
    }
    study.anchor_covariance = !independent_anchors;
    for (const auto& a : rungcal::mock_anchors(study.scenario))
      study.parameters.push_back("mu_" + a.group);
    rungcal::throw_if_invalid(study.check(), "(command line)");
    const auto level = spdlog::get_level();
    spdlog::set_level(spdlog::level::err);  // every mock's own warnings would bury the table
    rungcal::StudyResult result = rungcal::run_study(study);
    spdlog::set_level(level);
    std::cout << rungcal::study_table(result);
    if (!out.empty()) rungcal::write_file_atomically(out, result.to_json(study).dump(2) + "\n");
    return rungcal::ExitCode::kSuccess;
  });
}
