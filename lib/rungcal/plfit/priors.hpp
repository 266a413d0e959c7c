// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include <Eigen/Core>

#include "rungcal/core/random.hpp"
#include "rungcal/plfit/model.hpp"

namespace rungcal {

// A fit's Gaussian priors as whitened residuals z_k = sum_j w_kj (t_j - c_j), so that
// -ln p = 1/2 sum_k z_k^2 (up to a constant). An independent prior gives one row, w = 1 /
// sigma. The anchors' moduli, when correlated (FitSettings::anchor_prior_correlation R, the
// covariance C = S R S with S the priors' sigmas), give one row per anchor from the inverse
// Cholesky factor: z = L^-1 (mu - c) with C = L L^T, so sum z^2 = (mu - c)^T C^-1 (mu - c).
// Rows hold only free or prior parameters' indices; fixed parameters carry no prior.
struct PriorRow {
  std::vector<int> params;      // layout indices
  std::vector<double> weights;  // w_kj, one per index
};
std::vector<PriorRow> prior_rows(const FitSettings& settings, const ParameterLayout& layout);

// The anchors' moduli among a parameter vector: `count` parameters from `first`, with their
// priors' correlation (empty: independent).
struct AnchorBlock {
  int first = -1, count = 0;
  Eigen::MatrixXd correlation;
};
// The same for any parameter vector (the joint fit's).
std::vector<PriorRow> prior_rows(const std::vector<ParamSpec>& params, const AnchorBlock& anchors);
double prior_residual(const PriorRow& row, const std::vector<ParamSpec>& params, const double* t);
void redraw_prior_centres(std::vector<ParamSpec>& params, const AnchorBlock& anchors, Random& rng);

// z_k at t, the prior centres taken from settings.params[j].value.
double prior_residual(const PriorRow& row, const FitSettings& settings, const double* t);

// Redraws every prior's centre from its Gaussian, the correlated anchors jointly (c + L x,
// x standard normal): the bootstrap's resamples then carry the priors as the covariance does.
void redraw_prior_centres(FitSettings& settings, const ParameterLayout& layout, Random& rng);

// "" when C (mag^2) is usable as the covariance of n anchors' moduli priors, else the broken
// rule: square n x n, symmetric, positive diagonal, positive definite.
std::string check_anchor_covariance(const Eigen::MatrixXd& covariance, int n_anchors);

// W = L^-1 with L L^T = S R S (S = diag(sigma); an empty R: independent): W (mu - c) are
// the whitened residuals of a joint Gaussian prior.
Eigen::MatrixXd prior_whitener(const Eigen::VectorXd& sigma, const Eigen::MatrixXd& correlation);

// R = D^-1 C D^-1 with D = sqrt(diag C); C must have passed check_anchor_covariance.
Eigen::MatrixXd correlation_of(const Eigen::MatrixXd& covariance);

}  // namespace rungcal
