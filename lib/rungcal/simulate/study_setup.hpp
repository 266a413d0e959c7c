// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "rungcal/simulate/study.hpp"

namespace rungcal {

// A simulation study as rungcal-study's command line names it: the choices by name, turned
// into StudyOptions by apply_study_choices. The numeric settings (mocks, stars, the fit's
// grid and outlier shape, clusters, anchors) go straight into StudyOptions.
struct StudyChoices {
  std::string relation = "wesenheit";   // the preset truth: wesenheit (sigma_int 0.08) or optical
  std::string distances = "disk";       // kMockDistanceNames
  std::string contaminations = "all";   // all, none, or a comma list (kStudyContaminations)
  std::string blend_law = "moderate";   // kMockBlendLawNames
  std::string outlier_law = "shifted";  // kMockOutlierLawNames
  std::string space = "hierarchical";   // kFitSpaceNames
  std::string distance_prior = "smooth_histogram";  // kDistancePriorNames
  std::string blend_component;                      // kBlendComponentNames ("": the fit's default)
  std::string outlier_parallax_law;        // kOutlierParallaxLawNames ("": the fit's default)
  std::string scatter_correction;          // kScatterCorrectionNames ("": the fit's default)
  std::string covariance;                  // kCovarianceEstimateNames ("": the fit's default)
  bool metallicity = true;                 // fit the [Fe/H] term (the truth has gamma = -0.2)
  int joint = 0;                           // 0: X alone; 2-4: X and the first joint - 1 of V, I, K
  double red_companions = 1.0;             // joint: companion flux ratio x this in K, / this in V
  bool free_outlier_shape = false;         // fit the outlier component's shift and width
  bool hold_outlier_factor = false;        // hold the outlier's parallax factor at its value
  bool fix_scatter_correlation = false;    // joint: hold rho at the mocks' truth
  bool grey_blend_model = false;           // joint: hold the blend ratios at 1
  bool independent_anchor_priors = false;  // ignore the mock anchors' correlation
  double blend_scale_prior = 0;            // > 0: a Gaussian prior of this width on the blend scale
  bool fix_blend_scale = false;            // hold the blend scale at its start value
  int bootstrap = 0;                       // resamples per mock
  std::uint64_t seed = 1;                  // seed of the first mock
};

// The contaminations a study can switch on one by one, with the size each gets (method
// brief, section 4b's list; the sizes are the study's, in docs/method.md).
struct StudyContamination {
  const char* name;
  double MockScenario::*field;
  double value;
};
extern const std::vector<StudyContamination> kStudyContaminations;

// The joint study's further relations of the same stars (invented truths of V-, I- and
// K-like bands, for simulations only), the first joint - 1 of them.
std::vector<MockRelation> study_joint_relations(int joint);

// Fills study from the choices; throws InputError naming the command-line option and the
// rule for a name that is not one of its table's.
void apply_study_choices(const StudyChoices& choices, StudyOptions& study);

// A rule broken by one of the fit's options that rungcal-study sets from its command line,
// "fit.<key>: <rule>", restated with the option's name first, "--<option>: <rule> (fit.<key>)",
// since the study's user typed the option, not the config key; other rules as they are.
std::string with_study_option_name(const std::string& rule);

}  // namespace rungcal
