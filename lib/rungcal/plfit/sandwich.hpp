// SPDX-License-Identifier: MIT
#pragma once

#include <Eigen/Core>

#include "rungcal/plfit/model.hpp"

namespace rungcal {

// d rho / d s of a robust loss at s = r^2 (losses.hpp), for the sandwich's curvature term:
//   huber   0 (s <= b), -a / (2 s^(3/2)) (s > b)
//   soft_l1 -(1 + s/b)^(-3/2) / (2 b)
//   cauchy  -1 / (b (1 + s/b)^2)
//   tukey   -2 (1 - s/b) / b (s <= b), 0 (s > b)
double loss_second_derivative(LossKind kind, double a, double s);

// The sandwich (Huber 1967, Proc. Fifth Berkeley Symp. 1, 221; White 1980, Econometrica 48,
// 817) covariance of a robust-loss fit in a residual space: with psi_i = rho'(r_i^2) r_i
// grad r_i each star's estimating function,
//   A = sum_i w_i (rho'(r_i^2) + 2 rho''(r_i^2) r_i^2) grad r_i grad r_i^T   (+ 1/sigma_p^2 per
//   prior) B = sum_i w_i (rho'(r_i^2) r_i)^2 grad r_i grad r_i^T                   (+ 1/sigma_p^2
//   per prior) Cov = A^-1 B A^-1,
// for the free parameters other than the intrinsic scatter (A is the Gauss-Newton part of
// the objective's Hessian; w_i the row's bootstrap multiplicity). The model covariance
// A^-1 alone assumes the loss is the data's true likelihood, which a robust loss is not: on
// outlier-contaminated mocks it understates the spread of the estimates (tests/sandwich_test.cpp).
// The gradients are central differences of the raw residuals (star_residuals). The scatter's
// row and column are taken from `model_covariance` with its cross terms set to zero (its
// estimating equation is not the loss's). Returns false when A is singular.
bool sandwich_covariance(const FitData& data, const FitSettings& settings,
                         const ParameterLayout& layout, const Eigen::VectorXd& theta,
                         const Eigen::MatrixXd& model_covariance, Eigen::MatrixXd& covariance);

}  // namespace rungcal
