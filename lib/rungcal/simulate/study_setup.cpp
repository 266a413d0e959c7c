// SPDX-License-Identifier: MIT
#include "rungcal/simulate/study_setup.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <array>
#include <sstream>

#include "rungcal/core/enum_table.hpp"
#include "rungcal/core/error.hpp"

namespace rungcal {

const std::vector<StudyContamination> kStudyContaminations = {
    {"blends", &MockScenario::blend_fraction, 0.03},
    {"parallax_outliers", &MockScenario::parallax_outlier_fraction, 0.03},
    {"feh_errors", &MockScenario::feh_error, 0.08},
    {"overtones", &MockScenario::overtone_fraction, 0.15},
    {"far_stars", &MockScenario::far_fraction, 0.08},
    {"ebv_errors", &MockScenario::ebv_error, 0.04}};

namespace {

InputError bad_choice(const char* option, const std::string& value, const std::string& choices) {
  return InputError({option, {}, {}}, "config_value", "'" + value + "' is not one of: " + choices);
}

template <typename Enum, std::size_t N>
Enum parse_choice(const EnumTable<Enum, N>& table, const std::string& value, const char* option) {
  if (auto parsed = table.parse(value)) return *parsed;
  throw bad_choice(option, value, table.choices());
}

// The two kinds of relation the acceptance study asks for (method brief, section 4b).
void apply_relation_preset(const std::string& name, MockScenario& s) {
  if (name == "wesenheit") {
    s.sigma_int = 0.08, s.extinction_per_ebv = 0.0, s.alpha = -5.9, s.beta = -3.3;
  } else if (name == "optical") {
    s.sigma_int = 0.20, s.extinction_per_ebv = 3.1, s.alpha = -3.9, s.beta = -2.4;
  } else {
    throw bad_choice("--relation", name, "wesenheit, optical");
  }
}

void apply_contaminations(const std::string& list, MockScenario& s) {
  std::stringstream in(list);
  std::string item;
  while (std::getline(in, item, ',')) {
    if (item == "none" || item.empty()) continue;
    bool known = item == "all";
    for (const auto& c : kStudyContaminations)
      if (item == "all" || item == c.name) s.*c.field = c.value, known = true;
    if (!known) {
      std::string names = "all, none";
      for (const auto& c : kStudyContaminations) names += std::string(", ") + c.name;
      throw bad_choice("--contaminations", item, names);
    }
  }
}

// A red companion: its flux ratio 1/r times X's in V and r times in K (I as X).
void colour_companions(double red_companions, std::vector<MockRelation>& relations) {
  for (auto& r : relations)
    r.companion_colour =
        r.name == "V" ? 1.0 / red_companions : (r.name == "K" ? red_companions : 1.0);
}

// The joint fit of X and the mocks' further relations, and the parameters the study reports.
void set_up_joint(const StudyChoices& c, const RelationOptions& x, StudyOptions& study) {
  study.fit.joint = true;
  study.parameters.clear();
  for (const auto& r : study.scenario.more_relations) {
    RelationOptions more = x;
    more.name = more.band = r.name;
    study.fit.relations.push_back(more);
  }
  for (const auto& r : study.fit.relations)
    for (const std::string p : {"alpha_", "beta_", "gamma_", "sigma_int_"})
      if (c.metallicity || p != "gamma_") study.parameters.push_back(p + r.name);
  study.parameters.push_back("scatter_correlation");
  study.parameters.push_back("parallax_offset_mas");
  // The blend ratios: a true value only for grey companions (MockScenario::truth), the mean
  // estimate always.
  if (!c.grey_blend_model && study.fit.hierarchical.blends != BlendComponent::kNone)
    for (const auto& r : study.scenario.more_relations)
      study.parameters.push_back("blend_ratio_" + r.name);
  study.fit.joint_scatter_correlation.value = study.scenario.scatter_correlation;
  if (c.fix_scatter_correlation) study.fit.joint_scatter_correlation.mode = ParamMode::kFixed;
  if (c.grey_blend_model) study.fit.joint_blend_ratio = {ParamMode::kFixed, 1.0, 0, true};
}

}  // namespace

std::vector<MockRelation> study_joint_relations(int joint) {
  const std::vector<MockRelation> all = {{"V", -3.9, -2.4, -0.2, 0.20, 3.1},
                                         {"I", -4.8, -2.9, -0.2, 0.14, 1.9},
                                         {"K", -5.7, -3.2, -0.2, 0.09, 0.35}};
  if (joint < 0 || joint == 1 || joint > 4)
    throw InputError({"--joint", {}, {}}, "config_value", "must be 0 (one relation) or 2 to 4");
  return {all.begin(), all.begin() + std::max(0, joint - 1)};
}

void apply_study_choices(const StudyChoices& c, StudyOptions& study) {
  MockScenario& s = study.scenario;
  apply_relation_preset(c.relation, s);
  apply_contaminations(c.contaminations, s);
  s.seed = c.seed;
  s.distances = parse_choice(kMockDistanceNames, c.distances, "--distances");
  s.blend_law = parse_choice(kMockBlendLawNames, c.blend_law, "--blend-law");
  s.outlier_law = parse_choice(kMockOutlierLawNames, c.outlier_law, "--outlier-law");
  FitOptions& fit = study.fit;
  fit.space = parse_choice(kFitSpaceNames, c.space, "--space");
  fit.hierarchical.prior = parse_choice(kDistancePriorNames, c.distance_prior, "--distance-prior");
  if (!c.blend_component.empty())
    fit.hierarchical.blends =
        parse_choice(kBlendComponentNames, c.blend_component, "--blend-component");
  if (!c.outlier_parallax_law.empty())
    fit.hierarchical.outlier_parallax =
        parse_choice(kOutlierParallaxLawNames, c.outlier_parallax_law, "--outlier-parallax-law");
  if (!c.scatter_correction.empty())
    fit.hierarchical.scatter_correction =
        parse_choice(kScatterCorrectionNames, c.scatter_correction, "--scatter-correction");
  if (!c.covariance.empty())
    fit.hierarchical.covariance =
        parse_choice(kCovarianceEstimateNames, c.covariance, "--covariance");
  if (fit.space != FitSpace::kHierarchical) fit.loss = LossKind::kHuber;  // its documented default
  fit.input_path = "(mock)";
  if (c.free_outlier_shape) fit.outlier_shift.mode = fit.outlier_width.mode = ParamMode::kFree;
  if (c.hold_outlier_factor)
    fit.outlier_factor = ParamSpec{ParamMode::kFixed, fit.outlier_factor.value, 0, true};
  if (c.blend_scale_prior > 0)
    fit.blend_scale.mode = ParamMode::kPrior, fit.blend_scale.prior_sigma = c.blend_scale_prior;
  if (c.fix_blend_scale) fit.blend_scale.mode = ParamMode::kFixed;
  fit.bootstrap = c.bootstrap;
  RelationOptions x;
  x.name = x.band = "X";
  x.metallicity = c.metallicity;
  fit.relations = {x};
  if (!c.metallicity) study.parameters = {"alpha", "beta", "parallax_offset_mas", "sigma_int"};
  s.more_relations = study_joint_relations(c.joint);
  if (!(c.red_companions > 0))
    throw InputError({"--red-companions", {}, {}}, "config_value", "must be > 0");
  colour_companions(c.red_companions, s.more_relations);
  if (c.joint > 0) set_up_joint(c, x, study);
  study.anchor_covariance = !c.independent_anchor_priors;
  for (const auto& a : mock_anchors(s)) study.parameters.push_back("mu_" + a.group);
}

namespace {

// The fit's config keys that rungcal-study sets from an option of its own.
struct StudyOptionOfFitKey {
  const char* key;
  const char* option;
};
constexpr std::array<StudyOptionOfFitKey, 10> kStudyOptionsOfFitKeys{{
    {"fit.histogram_smoothing", "--histogram-smoothing"},
    {"fit.histogram_step_mag", "--histogram-step"},
    {"fit.histogram_kernel_fraction", "--histogram-kernel"},
    {"fit.histogram_margin_mag", "--histogram-margin"},
    {"fit.quadrature_nodes", "--quadrature-nodes"},
    {"fit.outlier_mag_shift", "--outlier-shift"},
    {"fit.outlier_mag_width", "--outlier-width"},
    {"fit.outlier_parallax_factor", "--outlier-parallax-factor"},
    {"fit.blend_scale_mag", "--blend-scale"},
    {"fit.blend_min_mag", "--blend-min-mag"},
}};

}  // namespace

std::string with_study_option_name(const std::string& rule) {
  for (const StudyOptionOfFitKey& k : kStudyOptionsOfFitKeys) {
    const std::string prefix = std::string(k.key) + ":";
    if (rule.rfind(prefix, 0) == 0)
      return fmt::format("{}:{} ({})", k.option, rule.substr(prefix.size()), k.key);
  }
  return rule;
}

}  // namespace rungcal
