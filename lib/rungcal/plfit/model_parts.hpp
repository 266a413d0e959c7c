// SPDX-License-Identifier: MIT
#pragma once

// The relation model's parts, shared by its files (relation_cost.cpp holds the residuals per
// fit space and their Ceres cost; model.cpp the layout, the resampled data, the start, the
// solve and the covariance). Not an interface of its own: include model.hpp from outside.

#include <ceres/ceres.h>

#include <vector>

#include <Eigen/Core>

#include "rungcal/plfit/model.hpp"
#include "rungcal/plfit/priors.hpp"

namespace rungcal::model_parts {

inline constexpr double kFiveOverLn10 = 5.0 / 2.302585092994045684;

// The scatter is fitted as the variance sigma^2 >= 0: its Jacobian column does not vanish at
// sigma = 0, where a maximum-likelihood scatter often sits for small samples, and the bound
// keeps it physical. Outside the solver the slot holds sigma.
Eigen::VectorXd to_internal(const Eigen::VectorXd& t, const ParameterLayout& L);
Eigen::VectorXd to_external(const Eigen::VectorXd& v, const ParameterLayout& L);

// True when the scatter is free and fitted by the decoupled estimator (ScatterEstimator).
bool decoupled(const FitSettings& s, const ParameterLayout& L);

// The whole relation as one Ceres residual block with analytic derivatives, one pass over
// the stars writing contiguous Jacobian rows; the robust loss enters as
// f = sgn(r) sqrt(rho(r^2)), whose squares sum to the robust objective exactly.
class RelationCost final : public ceres::CostFunction {
 public:
  // reference: internal parameters at which s^2 = base + per_var sigma^2 is frozen for the
  // normalisation (decoupled estimator); nullptr for the full likelihood.
  RelationCost(const FitData& d, const FitSettings& s, const ParameterLayout& L,
               const Eigen::VectorXd* reference);

  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override;

 private:
  bool evaluate_fast(const double* t, double* residuals, double* J) const;
  void robust(double r, double& f, double& df_dr) const;

  const FitData& d_;
  const FitSettings& s_;
  const ParameterLayout& L_;
  int n_stars_ = 0, n_norm_ = 0;
  std::vector<PriorRow> priors_;
  std::vector<double> frozen_base_, frozen_per_var_;
  bool fast_ = false;  // evaluate_fast applies (see fast_parallax_residuals)
};

// Adds the cost to the problem over theta (internal parameters), with the scatter's bound
// and the fixed parameters held.
void configure_problem(ceres::Problem& problem, RelationCost* cost, const FitSettings& s,
                       const ParameterLayout& L, double* theta);

}  // namespace rungcal::model_parts
