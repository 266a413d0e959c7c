// SPDX-License-Identifier: MIT
#pragma once

#include <cmath>
#include <memory>

#include <Eigen/Core>

#include "rungcal/core/enum_table.hpp"

namespace ceres {
class LossFunction;
}

namespace rungcal {

// Robust losses rho(s) of a squared normalised residual s = r^2, with scale a in units of
// sigma (b = a^2). Definitions are Ceres Solver's (ceres/loss_function.h):
//   huber:   rho = s (s <= b), 2 a sqrt(s) - b (s > b)
//   soft_l1: rho = 2 b (sqrt(1 + s/b) - 1)
//   cauchy:  rho = b log(1 + s/b)
//   tukey:   rho = b/3 (1 - (1 - s/b)^3) (s <= b), b/3 (s > b)
// The first three equal scipy.optimize.least_squares' 'huber', 'soft_l1', 'cauchy' with
// f_scale = a. Check (r = 3, a = 1): huber 5, soft_l1 4.324555, cauchy 2.302585.
enum class LossKind { kNone, kHuber, kSoftL1, kCauchy, kTukey };
inline constexpr EnumTable<LossKind, 5> kLossNames{{{
    {LossKind::kNone, "none"},
    {LossKind::kHuber, "huber"},
    {LossKind::kSoftL1, "soft_l1"},
    {LossKind::kCauchy, "cauchy"},
    {LossKind::kTukey, "tukey"},
}}};

// rho(s) and rho'(s) of one squared residual: the single definition every caller uses.
inline void loss_terms(LossKind kind, double a, double s, double& rho, double& rho1) {
  const double b = a * a;
  switch (kind) {
    case LossKind::kNone:
      rho = s, rho1 = 1.0;
      return;
    case LossKind::kHuber:
      if (s > b) {
        double root = std::sqrt(s);
        rho = 2.0 * a * root - b, rho1 = a / root;
      } else {
        rho = s, rho1 = 1.0;
      }
      return;
    case LossKind::kSoftL1: {
      double t = std::sqrt(1.0 + s / b);
      rho = 2.0 * b * (t - 1.0), rho1 = 1.0 / t;
      return;
    }
    case LossKind::kCauchy: {
      double t = 1.0 + s / b;
      rho = b * std::log(t), rho1 = 1.0 / t;
      return;
    }
    case LossKind::kTukey:
      if (s > b) {
        rho = b / 3.0, rho1 = 0.0;
      } else {
        double u = 1.0 - s / b;
        rho = b / 3.0 * (1.0 - u * u * u), rho1 = u * u;
      }
      return;
  }
}

// rho(s) and rho'(s) element-wise.
void evaluate_loss(LossKind kind, double scale, const Eigen::ArrayXd& s, Eigen::ArrayXd& rho,
                   Eigen::ArrayXd& rho1);

// The same loss as a Ceres object (nullptr for kNone), for tests and per-block use.
std::unique_ptr<ceres::LossFunction> make_ceres_loss(LossKind kind, double scale);

}  // namespace rungcal
