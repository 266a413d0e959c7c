// SPDX-License-Identifier: MIT
#pragma once

#include <memory>
#include <string>
#include <vector>

#include <Eigen/Core>

#include "rungcal/plfit/blend_density.hpp"
#include "rungcal/plfit/model.hpp"

namespace rungcal {

// The hierarchical likelihood of one relation (method brief, section 4b; FitSpace::
// kHierarchical). Per parallax calibrator i, member component:
//   L_i = int dmu p(mu | L, k, a) N(m_i | mu + M_i, V_i) N(pi_i | 10^(-0.2 (mu - 10)) + offset,
//   sigma_pi,i^2)
// with V_i = sigma_m,i^2 + sigma_int^2 + gamma^2 W_i. [Fe/H] errors (Kelly 2007, ApJ 665,
// 1489): M_i uses Zbar_i = (tau^2 Z_i + s_i^2 mu_Z) / (tau^2 + s_i^2), W_i = tau^2 s_i^2 /
// (tau^2 + s_i^2), and every star adds ln N(Z_i | mu_Z, tau^2 + s_i^2). Known-distance stars
// use N(m_i | mu_k + M_i, V_i + sigma_mu^2), anchor stars N(m_i | mu_g + M_i, V_i).
// Outliers (Hogg, Bovy & Lang 2010, arXiv:1008.4686) and blends:
//   L_i = (1 - f) [(1 - f_b) L_i^member + f_b L_i^blend] + f L_i^out,
// the outlier component as the member's with the HierarchicalSettings widening, the blend
// component's magnitude term the exponentially modified Gaussian (blend_log_density) of
// r + blend_min_mag (blends start that much brighter) with the member's parallax term. Blends are a
// share of the non-outliers, so either mixture can be switched off without changing the other's
// meaning. The mu integral is Gauss-Hermite quadrature centred on the integrand's mode with its
// curvature as the width (Laplace centring; a smooth floor keeps the width, and so -ln L, smooth in
// the parameters), so narrow integrands from precise parallaxes are exact.
//
// Parameters: the ParameterLayout's, with sigma_int, the outlier and blend fractions, the
// blend scale, L, k + 1, a and tau solved for on a log (logit for the fractions) scale so
// that each stays in its domain.

// -ln L (priors included) and its gradient in the solver's coordinates; exposed for tests.
struct HierarchicalValue {
  double neg_log_likelihood = 0;  // -ln L, the priors' Gaussian terms included
  Eigen::VectorXd gradient;       // d(-ln L) / d(internal parameters)
  bool finite = false;
};
HierarchicalValue hierarchical_value(const FitData& data, const FitSettings& settings,
                                     const ParameterLayout& layout, const Eigen::VectorXd& theta);

// Maximum likelihood from a start (external parameters); fixed parameters stay at theirs.
FitSolution solve_hierarchical(const FitData& data, const FitSettings& settings,
                               const ParameterLayout& layout, const Eigen::VectorXd& start);

// Covariance from the Hessian of -ln L at the optimum, computed in the solver's coordinates
// (central differences of the analytic gradient) and carried to the reported parameters by
// the delta method. Parameters on the edge of their domain (sigma_int or the outlier
// fraction at zero) cannot be given an error: they are held at their value, their rows are
// NaN, and `undetermined` names them. Returns false when the Hessian is not positive definite.
// preconditioner: when given, set to the bootstrap's metric from the same Hessian
// (FitSettings::preconditioner; unit steps for the parameters on an edge). sandwich: when
// given, set to the sandwich covariance over the same parameters (likelihood_solver.hpp,
// sandwich_from_hessian; the stars are the units), or emptied when it cannot be formed.
bool hierarchical_covariance(const FitData& data, const FitSettings& settings,
                             const ParameterLayout& layout, const Eigen::VectorXd& theta,
                             Eigen::MatrixXd& covariance, std::vector<std::string>& undetermined,
                             std::shared_ptr<const Eigen::MatrixXd>* preconditioner = nullptr,
                             Eigen::MatrixXd* sandwich = nullptr);

// theta with sigma_int by restricted maximum likelihood (ScatterCorrection::kRestricted,
// likelihood_solver.hpp: restricted_step): the location parameters are alpha, beta,
// beta_long, gamma, the offset and the groups' moduli; `covariance` is
// hierarchical_covariance's at theta.
Eigen::VectorXd hierarchical_restricted(const FitData& data, const FitSettings& settings,
                                        const ParameterLayout& layout, const Eigen::VectorXd& theta,
                                        const Eigen::MatrixXd& covariance);

// Per star (parallax, known, anchor order): the probability of being a member, neither an
// outlier nor a blend.
Eigen::ArrayXd hierarchical_membership(const FitData& data, const FitSettings& settings,
                                       const ParameterLayout& layout, const Eigen::VectorXd& theta);

// Start values of the hierarchical model's own parameters from the data (outlier and blend
// fractions 0.02, L from the stars' photometric distances, the [Fe/H] population's moments).
void hierarchical_start(const FitData& data, const FitSettings& settings,
                        const ParameterLayout& layout, Eigen::VectorXd& theta);

// The smooth-histogram prior's grid over the calibrators' rough distance moduli (from
// parallaxes with S/N > 5, else photometric from a line through those), 1.5 mag beyond them
// on each side, step `settings.histogram_step`: sets histogram_start, returns the bin count
// (at most 30; the step grows when the range needs more).
int histogram_grid(const FitData& data, HierarchicalSettings& settings);

// The histogram's first centre at alpha: the grid moves with alpha (HierarchicalSettings).
double histogram_start_at(const HierarchicalSettings& settings, double alpha);

// Gauss-Hermite nodes x_k and weights w_k for int f(x) exp(-x^2) dx: the nodes by the
// Golub-Welsch eigenvalue method (Golub & Welsch 1969, Math. Comp. 23, 221), the weights as
// Christoffel numbers from the orthonormal recurrence (accurate where the eigenvectors'
// are not: the outer weights of rules above ~30 nodes).
void gauss_hermite(int n, std::vector<double>& nodes, std::vector<double>& weights);

}  // namespace rungcal
