// SPDX-License-Identifier: MIT
#pragma once

#include <memory>
#include <string>
#include <vector>

#include <Eigen/Core>

#include "rungcal/plfit/joint.hpp"
#include "rungcal/plfit/model.hpp"

namespace rungcal {

// The hierarchical likelihood of several relations at once (method brief, section 4b;
// FitSpace::kHierarchical with [fit] joint = true). A star's relations share its latent
// distance modulus mu, its latent [Fe/H] and its membership. Its K magnitudes m_k scatter
// about mu + M_k with the covariance
//   S_kl = delta_kl (sigma_m,k^2 + sigma_int,k^2) + (1 - delta_kl) rho sigma_int,k sigma_int,l
//          + c_k c_l sigma_E^2 + gamma_k gamma_l W,
// (c_k = A_k/E(B-V) left in magnitude k, so one E(B-V) error moves every band; W the latent
// [Fe/H]'s variance given its measurement, as in hierarchical.hpp, which also gives M_k its
// Zbar). With r = m - M, P = S^-1 and a = 1^T P 1, the Gaussian factorises:
//   N_K(r - mu 1 | S) = N(m_eff - mu | 0, 1/a) exp(c),  m_eff = 1^T P r / a,
//   c = -(K-1)/2 ln 2 pi - 1/2 ln det S - 1/2 ln a - 1/2 (r^T P r - a m_eff^2),
// so the mu integral is the single relation's (hierarchical.hpp) with the magnitude m_eff
// and variance 1/a, and c carries the colours: what the bands say beyond mu. Outliers are
// grey (the same shift in every band): the outlier component adds width^2 1 1^T to S, which
// leaves c unchanged and acts on m_eff alone (a colour outlier, one band off, is not
// modelled: it is a Gaussian colour residual). A blend brightens band k by kappa_k (b0 + b),
// kappa_k the relation's blend_ratio (1 for the first): it moves m_eff and leaves a colour
// residual linear and quadratic in b (coloured_blend_log_density; docs/method.md, "Coloured
// blends"); with every ratio 1 it is grey and acts on m_eff alone.
// A star of JointData::weight w counts w times (a bootstrap resample's repeats).
// Gradients are exact: d/dr and d/dS of each star's -ln L by matrix calculus, then the chain
// rule to the parameters. The smooth-histogram distance prior's grid moves with the mean of
// the relations' alphas (HierarchicalSettings::histogram_alpha_ref is that mean's reference).
//
// settings: its params are by JointLayout index; its hierarchical settings, tolerances,
// preconditioner and anchor_prior_correlation (terms.n_anchors anchors from layout.anchor0)
// apply as in the single fit.

// -ln L (priors included) and its gradient in the solver's coordinates; exposed for tests.
struct JointHierarchicalValue {
  double neg_log_likelihood = 0;
  Eigen::VectorXd gradient;
  bool finite = false;
};
JointHierarchicalValue joint_hierarchical_value(const JointData& data, const FitSettings& settings,
                                                const JointLayout& layout,
                                                const Eigen::VectorXd& theta);

// Maximum likelihood from a start (external parameters); fixed parameters stay at theirs.
FitSolution solve_joint_hierarchical(const JointData& data, const FitSettings& settings,
                                     const JointLayout& layout, const Eigen::VectorXd& start);

// The inverse Hessian at theta, as hierarchical_covariance (parameters on an edge of their
// domain are named in `undetermined` and get NaN rows; sandwich as there, a star with all
// its relations one unit).
bool joint_hierarchical_covariance(const JointData& data, const FitSettings& settings,
                                   const JointLayout& layout, const Eigen::VectorXd& theta,
                                   Eigen::MatrixXd& covariance,
                                   std::vector<std::string>& undetermined,
                                   std::shared_ptr<const Eigen::MatrixXd>* preconditioner = nullptr,
                                   Eigen::MatrixXd* sandwich = nullptr);

// theta with the scatters and their correlation by restricted maximum likelihood
// (hierarchical_restricted): the location parameters are every relation's alpha, beta and
// gamma, the offset and the groups' moduli.
Eigen::VectorXd joint_hierarchical_restricted(const JointData& data, const FitSettings& settings,
                                              const JointLayout& layout,
                                              const Eigen::VectorXd& theta,
                                              const Eigen::MatrixXd& covariance);

// Per star: the probability of being a member, neither an outlier nor a blend.
Eigen::ArrayXd joint_hierarchical_membership(const JointData& data, const FitSettings& settings,
                                             const JointLayout& layout,
                                             const Eigen::VectorXd& theta);

}  // namespace rungcal
