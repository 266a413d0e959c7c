// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include <Eigen/Core>
#include <nlohmann/json.hpp>

#include "rungcal/core/enum_table.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// How the mock calibrators' true distances are spread.
enum class MockDistances {
  kDisk,         // a thin disk seen from inside: p(d) ~ d exp(-d / 2.5 kpc), 0.3-8 kpc
  kFlatModulus,  // distance modulus uniform in [8.5, 13.5] (0.5-5 kpc)
  kClumpy,       // eight associations at random distance moduli in [9, 13], 5% deep each
};
inline constexpr EnumTable<MockDistances, 3> kMockDistanceNames{{{
    {MockDistances::kDisk, "disk"},
    {MockDistances::kFlatModulus, "flat_modulus"},
    {MockDistances::kClumpy, "clumpy"},
}}};

// How much brighter a blended mock star is. The first is the law the study was tuned
// on; the others test the fit's blend component against blends it was not shaped for.
enum class MockBlendLaw {
  kModerate,          // brighter by U(0.3, 1.0) mag
  kFaintCompanions,   // a companion of flux ratio q ~ U(0, 1.5): 2.5 log10(1 + q), 0-1.0 mag
  kBrightCompanions,  // q ~ U(0.5, 4): 0.44-1.75 mag
  // The fit's own default blend component (docs/method.md, "Blends"): 0.3 mag plus a
  // Gamma(shape 2, mean 0.5 mag) draw, so that the model matches the mocks: a check of the
  // component itself, as MockOutlierLaw::kQuarticComponent is of the outlier component.
  kFitComponent,
};
inline constexpr EnumTable<MockBlendLaw, 4> kMockBlendLawNames{{{
    {MockBlendLaw::kModerate, "moderate"},
    {MockBlendLaw::kFaintCompanions, "faint_companions"},
    {MockBlendLaw::kBrightCompanions, "bright_companions"},
    {MockBlendLaw::kFitComponent, "fit_component"},
}}};

// One blend's brightening (mag, > 0) under a law: a companion of flux ratio q adds
// 2.5 log10(1 + q) (Pogson's ratio).
double mock_blend_brightening(MockBlendLaw law, Random& rng);

// How a gross parallax outlier is drawn. The first is the study's. The next two are the fit's
// own outlier components (docs/method.md, "Outliers"), self-consistency checks of the mixture:
// drawn from them, the outliers are what the model says, so what bias remains with the first
// is the outlier law's mismatch. The Gaussian one (the parallax error times 10, the magnitude
// widened by 1 mag) was the fit's default before 2026-12-04 and named `fit_component` until
// 2026-12-05; the quartic one is the default since 2026-12-05 (F = 6, where the fit settles
// on the study's mocks). The last is an astrometric solution whose error is underestimated by
// a factor drawn per star (a scale mixture, unlike the fit's one factor; its deviations reach
// into the members' core, which the first's never do).
enum class MockOutlierLaw {
  kShifted,              // parallax off by +-U(5, 20) of its errors; magnitude a member's
  kGaussianComponent,    // parallax + N(0, 99 sigma_pi^2) (x10 in all), magnitude + N(0, 1 mag^2)
  kQuarticComponent,     // parallax deviation +-chi(5) x 6 sigma_pi in all; magnitude a member's
  kUnderestimatedError,  // parallax error x F in all, F ~ U(5, 20); magnitude a member's
};
inline constexpr EnumTable<MockOutlierLaw, 4> kMockOutlierLawNames{{{
    {MockOutlierLaw::kShifted, "shifted"},
    {MockOutlierLaw::kGaussianComponent, "gaussian_component"},
    {MockOutlierLaw::kQuarticComponent, "quartic_component"},
    {MockOutlierLaw::kUnderestimatedError, "underestimated_error"},
}}};

// The quartic component's parallax scale over the error that kQuarticComponent draws with: the
// fit's start, and where it settles on the study's mocks (docs/method.md, "Outliers").
inline constexpr double kMockQuarticOutlierFactor = 6.0;

// What a gross outlier adds to a star's parallax (mas) and magnitude (mag, every band alike).
// With `replaces_member_noise` the parallax figure is the whole deviation from the true
// parallax plus offset, in place of the member's own error (the quartic component's law is
// that of the whole deviation).
struct MockOutlierShift {
  double parallax_mas = 0, magnitude = 0;
  bool replaces_member_noise = false;
};
MockOutlierShift mock_outlier_shift(MockOutlierLaw law, double parallax_err_mas, Random& rng);

// A further relation of the same mock stars (joint fits): its own truth, its magnitudes in
// mag0_<name>.
struct MockRelation {
  std::string name;
  double alpha = 0, beta = 0, gamma = 0, sigma_int = 0, extinction_per_ebv = 0;
  // A blend's companion light in this band relative to band X's, as flux ratios: with q its
  // flux ratio in X (brightening 2.5 log10(1 + q)), it is companion_colour q here. 1: grey
  // blends, every band brightened alike; a red companion has it above 1 in the infrared.
  double companion_colour = 1.0;
};

// The layout of the mocks' draws, recorded in each study run so that runs drawn under different
// layouts are never pooled: 2 since 2026-12-05 (a stream per star and effect: common random
// numbers between scenarios); 1 before (one stream through every star's draws in turn).
inline constexpr int kMockDrawLayout = 2;

// One mock catalog of parallax calibrators of one relation, already dereddened (the
// columns rungcal-fit reads, band "X"), with each contamination switchable on its own.
struct MockScenario {
  // The whole draw follows from it. Each star draws each effect (distance, period, [Fe/H],
  // scatter, photometry, E(B-V), blend, parallax, outlier, further bands) from a stream of its
  // own, whether the effect is on or not: two scenarios that differ in one contamination have
  // the same stars but for that contamination (common random numbers, for paired study rows).
  std::uint64_t seed = 1;
  int stars = 300;  // calibrators drawn
  // The truth: M = alpha + beta (log P_F - pivot) + gamma [Fe/H] + N(0, sigma_int).
  double alpha = -5.9, beta = -3.3, gamma = -0.2, sigma_int = 0.08, pivot_log_period = 1.0;
  double parallax_offset_mas = -0.010;       // observed parallax = true + offset + noise
  double feh_mean = 0.0, feh_spread = 0.15;  // the [Fe/H] population
  double mag_error = 0.02;                   // photometric error of the mean magnitudes (mag)
  double parallax_error_scale = 1.0;         // the parallax error law below, times this
  double extinction_per_ebv = 0.0;           // A/E(B-V) of the band: 0 for a Wesenheit magnitude
  MockDistances distances = MockDistances::kDisk;
  // Contaminations (0: off).
  double blend_fraction = 0;  // stars made too bright by unresolved companions
  MockBlendLaw blend_law = MockBlendLaw::kModerate;  // by how much
  double parallax_outlier_fraction = 0;              // gross outliers, drawn by outlier_law
  MockOutlierLaw outlier_law = MockOutlierLaw::kShifted;
  double feh_error = 0;          // [Fe/H] measurement error (dex); the catalog carries feh_err
  double overtone_fraction = 0;  // first-overtone pulsators, labelled, log P1 in [0.1, 0.7]
  double far_fraction = 0;       // stars at 8-15 kpc, with noisy (some negative) parallaxes
  double ebv_error = 0;          // E(B-V) error (mag): A/E(B-V) times it enters the magnitude
  // Further relations (joint fits). A star's intrinsic scatter is correlated between all its
  // relations by scatter_correlation (in [0, 1)); its E(B-V) error and [Fe/H] are the same in
  // each, and its blend brightening too unless a relation's companion_colour differs from 1. Their
  // draws come from the star's own stream for them: empty, the catalog is what it is with them
  // but for their columns.
  std::vector<MockRelation> more_relations;
  double scatter_correlation = 0;
  // Clusters (0: none): each at its own distance modulus, uniform in [9.5, 12] (0.8-2.5 kpc),
  // with cluster_members stars (group MOCK-CL<k>) drawn as the field stars are, contaminations
  // included, and a cluster parallax of error cluster_parallax_error_mas. Their draws come
  // from a stream of their own: the field stars are those of the same seed without them.
  int clusters = 0;
  int cluster_members = 4;
  double cluster_parallax_error_mas = 0.008;
  // Anchor galaxies (0: none): galaxy k at the true modulus 18.5 + 0.45 k, with
  // anchor_members stars (group MOCK-AN<k>) drawn as the field stars are, contaminations
  // included, at that distance (the fit does not use an anchor star's parallax). Each
  // galaxy's published modulus is its truth plus a draw of the anchors' joint error:
  // anchor_mu_error each, correlated by anchor_correlation between any two, as distances
  // that share one calibration are (mock_anchor_covariance). Their own stream, as the
  // clusters'.
  int anchors = 0;
  int anchor_members = 30;
  double anchor_mu_error = 0.03;
  double anchor_correlation = 0.0;

  std::string check() const;  // "" when usable, else "field: rule"
  // The true parameters by fit parameter name; with more_relations, by the joint fit's names
  // (alpha_X, ..., scatter_correlation).
  nlohmann::json truth() const;

 private:
  nlohmann::json relation_truth() const;  // truth() without the anchors' moduli
};

// Parallax errors grow with the observed magnitude m as for a bright-star astrometric
// survey: sigma_pi = 0.012 + 0.06 10^(0.4 (m - 15)) mas, 0.013 mas at m = 10, 0.072 at
// m = 15 (an invented law, for simulations only), times parallax_error_scale.
StarTable mock_calibrator_catalog(const MockScenario& scenario);

// The scenario's A/E(B-V) per band (X, then more_relations), as the deredden stage's COEFFS
// table gives them to the joint fit (run_fit's coefficients).
StarTable mock_coefficients(const MockScenario& scenario);

// The scenario's clusters as drawn: their group, true modulus and measured parallax.
struct MockCluster {
  std::string group;
  double mu = 0, parallax_mas = 0, parallax_err_mas = 0;
};
std::vector<MockCluster> mock_clusters(const MockScenario& scenario);

// The scenario's anchor galaxies as drawn: their group, true modulus, and the published
// modulus and its standard error that the fit takes as the prior.
struct MockAnchor {
  std::string group;
  double mu_true = 0, mu_published = 0, mu_err = 0;
};
std::vector<MockAnchor> mock_anchors(const MockScenario& scenario);
// The covariance of the anchors' published moduli (mag^2): anchor_mu_error^2 on the
// diagonal, anchor_correlation anchor_mu_error^2 off it (the fit's anchor_covariance).
Eigen::MatrixXd mock_anchor_covariance(const MockScenario& scenario);

}  // namespace rungcal
