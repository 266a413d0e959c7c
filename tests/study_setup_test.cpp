// SPDX-License-Identifier: MIT
// rungcal-study's choices by name, turned into the study's mocks and fits.
#include "rungcal/simulate/study_setup.hpp"

#include <algorithm>

#include <gtest/gtest.h>

#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

bool has(const std::vector<std::string>& v, const std::string& x) {
  return std::find(v.begin(), v.end(), x) != v.end();
}

// The detail of the InputError apply_study_choices throws ("" when it does not).
std::string refusal(const StudyChoices& c) {
  StudyOptions study;
  try {
    apply_study_choices(c, study);
  } catch (const InputError& e) {
    return e.where().file + " [" + e.rule() + "] " + e.detail();
  }
  return "";
}

TEST(StudySetup, DefaultsAreTheWesenheitDiskWithEveryContamination) {
  StudyOptions study;
  apply_study_choices(StudyChoices{}, study);
  const MockScenario& s = study.scenario;
  // The study's documented truth and contamination sizes (docs/method.md, "How well the fit
  // does: the simulation study").
  EXPECT_DOUBLE_EQ(s.sigma_int, 0.08);
  EXPECT_DOUBLE_EQ(s.extinction_per_ebv, 0.0);
  EXPECT_DOUBLE_EQ(s.alpha, -5.9);
  EXPECT_DOUBLE_EQ(s.blend_fraction, 0.03);
  EXPECT_DOUBLE_EQ(s.parallax_outlier_fraction, 0.03);
  EXPECT_DOUBLE_EQ(s.feh_error, 0.08);
  EXPECT_DOUBLE_EQ(s.overtone_fraction, 0.15);
  EXPECT_DOUBLE_EQ(s.far_fraction, 0.08);
  EXPECT_DOUBLE_EQ(s.ebv_error, 0.04);
  EXPECT_EQ(s.distances, MockDistances::kDisk);
  EXPECT_EQ(study.fit.space, FitSpace::kHierarchical);
  EXPECT_FALSE(study.fit.joint);
  ASSERT_EQ(study.fit.relations.size(), 1U);
  EXPECT_EQ(study.fit.relations[0].band, "X");
  EXPECT_EQ(study.parameters, (std::vector<std::string>{"alpha", "beta", "gamma",
                                                        "parallax_offset_mas", "sigma_int"}));
  EXPECT_EQ(study.fit.outlier_factor.mode, ParamMode::kFree);  // the fit's default, from 6
  EXPECT_DOUBLE_EQ(study.fit.outlier_factor.value, 6.0);
  EXPECT_EQ(study.check(), "");
  // --hold-outlier-factor holds it at its value.
  StudyChoices held;
  held.hold_outlier_factor = true;
  study.fit.outlier_factor.value = 10.0;  // as --outlier-parallax-factor 10 sets it
  apply_study_choices(held, study);
  EXPECT_EQ(study.fit.outlier_factor.mode, ParamMode::kFixed);
  EXPECT_DOUBLE_EQ(study.fit.outlier_factor.value, 10.0);
}

TEST(StudySetup, ContaminationsSwitchOnOneByOne) {
  StudyChoices c;
  c.relation = "optical";
  c.contaminations = "blends,far_stars";
  StudyOptions study;
  apply_study_choices(c, study);
  EXPECT_DOUBLE_EQ(study.scenario.sigma_int, 0.20);
  EXPECT_DOUBLE_EQ(study.scenario.extinction_per_ebv, 3.1);
  EXPECT_DOUBLE_EQ(study.scenario.blend_fraction, 0.03);
  EXPECT_DOUBLE_EQ(study.scenario.far_fraction, 0.08);
  EXPECT_DOUBLE_EQ(study.scenario.parallax_outlier_fraction, 0.0);
  EXPECT_DOUBLE_EQ(study.scenario.feh_error, 0.0);
  EXPECT_DOUBLE_EQ(study.scenario.ebv_error, 0.0);
}

TEST(StudySetup, JointStudyFitsEveryRelationAndReportsItsParameters) {
  StudyChoices c;
  c.joint = 4;
  c.red_companions = 2.0;
  StudyOptions study;
  apply_study_choices(c, study);
  EXPECT_TRUE(study.fit.joint);
  ASSERT_EQ(study.fit.relations.size(), 4U);
  ASSERT_EQ(study.scenario.more_relations.size(), 3U);
  EXPECT_DOUBLE_EQ(study.scenario.more_relations[0].companion_colour, 0.5);  // V: 1 / 2
  EXPECT_DOUBLE_EQ(study.scenario.more_relations[1].companion_colour, 1.0);  // I: as X
  EXPECT_DOUBLE_EQ(study.scenario.more_relations[2].companion_colour, 2.0);  // K: x 2
  for (const char* p : {"alpha_X", "gamma_V", "sigma_int_K", "scatter_correlation",
                        "parallax_offset_mas", "blend_ratio_V", "blend_ratio_K"})
    EXPECT_TRUE(has(study.parameters, p)) << p;
  EXPECT_FALSE(has(study.parameters, "alpha"));
  EXPECT_EQ(study.fit.joint_scatter_correlation.mode, ParamMode::kFree);

  c.grey_blend_model = c.fix_scatter_correlation = true;
  c.metallicity = false;
  StudyOptions grey;
  apply_study_choices(c, grey);
  EXPECT_FALSE(has(grey.parameters, "blend_ratio_V"));
  EXPECT_FALSE(has(grey.parameters, "gamma_X"));
  EXPECT_EQ(grey.fit.joint_scatter_correlation.mode, ParamMode::kFixed);
  EXPECT_EQ(grey.fit.joint_blend_ratio.mode, ParamMode::kFixed);
}

TEST(StudySetup, AnchorsAddTheirModuliAndOtherSpacesTheirDefaultLoss) {
  StudyChoices c;
  c.space = "magnitude";
  c.independent_anchor_priors = true;
  StudyOptions study;
  study.scenario.anchors = 2;
  apply_study_choices(c, study);
  EXPECT_TRUE(has(study.parameters, "mu_MOCK-AN000"));
  EXPECT_TRUE(has(study.parameters, "mu_MOCK-AN001"));
  EXPECT_FALSE(study.anchor_covariance);
  EXPECT_EQ(study.fit.space, FitSpace::kMagnitude);
  EXPECT_EQ(study.fit.loss, LossKind::kHuber);
}

TEST(StudySetup, NamesOutsideTheirTablesAreRefusedNamingTheOption) {
  StudyChoices c;
  c.contaminations = "blends,dust";
  EXPECT_EQ(refusal(c),
            "--contaminations [config_value] 'dust' is not one of: all, none, blends, "
            "parallax_outliers, feh_errors, overtones, far_stars, ebv_errors");
  c = {};
  c.relation = "infrared";
  EXPECT_EQ(refusal(c), "--relation [config_value] 'infrared' is not one of: wesenheit, optical");
  c = {};
  c.distances = "halo";
  EXPECT_EQ(refusal(c),
            "--distances [config_value] 'halo' is not one of: disk, flat_modulus, clumpy");
  c = {};
  c.joint = 1;
  EXPECT_EQ(refusal(c), "--joint [config_value] must be 0 (one relation) or 2 to 4");
  c = {};
  c.red_companions = 0;
  EXPECT_EQ(refusal(c), "--red-companions [config_value] must be > 0");
  c = {};
  c.outlier_law = "uniform";
  EXPECT_EQ(refusal(c),
            "--outlier-law [config_value] 'uniform' is not one of: shifted, gaussian_component, "
            "quartic_component, underestimated_error");
  c = {};
  c.outlier_law = "quartic_component";
  StudyOptions study;
  apply_study_choices(c, study);
  EXPECT_EQ(study.scenario.outlier_law, MockOutlierLaw::kQuarticComponent);
  c = {};
  c.outlier_parallax_law = "flat";
  EXPECT_EQ(refusal(c),
            "--outlier-parallax-law [config_value] 'flat' is not one of: gaussian, rising, "
            "quartic");
  c.outlier_parallax_law = "gaussian";
  apply_study_choices(c, study);
  EXPECT_EQ(study.fit.hierarchical.outlier_parallax, OutlierParallaxLaw::kGaussian);
  c = {};
  c.scatter_correction = "unbiased";
  EXPECT_EQ(refusal(c),
            "--scatter-correction [config_value] 'unbiased' is not one of: none, restricted");
  c.scatter_correction = "none";
  apply_study_choices(c, study);
  EXPECT_EQ(study.fit.hierarchical.scatter_correction, ScatterCorrection::kNone);
  c = {};
  c.covariance = "bootstrap";
  EXPECT_EQ(refusal(c), "--covariance [config_value] 'bootstrap' is not one of: hessian, sandwich");
  c.covariance = "sandwich";
  apply_study_choices(c, study);
  EXPECT_EQ(study.fit.hierarchical.covariance, CovarianceEstimate::kSandwich);
  c = {};
  c.space = "sky";
  EXPECT_EQ(refusal(c).rfind("--space [config_value] 'sky' is not one of: ", 0), 0U);
}

// A broken fit rule is named by the option the study's user typed, the config key beside it.
TEST(StudySetup, FitRulesAreRestatedWithTheStudysOptionName) {
  StudyOptions study;
  study.fit.relations = {RelationOptions{}};
  study.fit.relations[0].name = study.fit.relations[0].band = "X";
  study.fit.outlier_factor.value = 2.0;
  EXPECT_EQ(with_study_option_name(study.check()),
            "--outlier-parallax-factor: 2 is outside the parameter's domain (> 3, below 1000000) "
            "(fit.outlier_parallax_factor)");
  study.fit.outlier_factor.value = 6.0;
  study.fit.hierarchical.quadrature_nodes = 4;
  EXPECT_EQ(with_study_option_name(study.check()),
            "--quadrature-nodes: must be 8 to 128 (fit.quadrature_nodes)");
  // A rule of a key without an option of its own stays as it was.
  EXPECT_EQ(with_study_option_name("fit.loss_scale: must be positive"),
            "fit.loss_scale: must be positive");
  EXPECT_EQ(with_study_option_name(""), "");
}

}  // namespace
}  // namespace rungcal
