// SPDX-License-Identifier: MIT
#include "rungcal/plfit/losses.hpp"

#include <ceres/loss_function.h>

namespace rungcal {

void evaluate_loss(LossKind kind, double a, const Eigen::ArrayXd& s, Eigen::ArrayXd& rho, Eigen::ArrayXd& rho1) {
  const double b = a * a;
  switch (kind) {
    case LossKind::kNone:
      rho = s;
      rho1 = Eigen::ArrayXd::Ones(s.size());
      return;
    case LossKind::kHuber: {
      Eigen::ArrayXd root = s.sqrt();
      rho = (s > b).select(2.0 * a * root - b, s);
      rho1 = (s > b).select(a / root, 1.0);
      return;
    }
    case LossKind::kSoftL1: {
      Eigen::ArrayXd t = (1.0 + s / b).sqrt();
      rho = 2.0 * b * (t - 1.0);
      rho1 = 1.0 / t;
      return;
    }
    case LossKind::kCauchy: {
      Eigen::ArrayXd t = 1.0 + s / b;
      rho = b * t.log();
      rho1 = 1.0 / t;
      return;
    }
    case LossKind::kTukey: {
      Eigen::ArrayXd u = 1.0 - s / b;
      rho = (s > b).select(b / 3.0, b / 3.0 * (1.0 - u * u * u));
      rho1 = (s > b).select(0.0, u * u);
      return;
    }
  }
}

std::unique_ptr<ceres::LossFunction> make_ceres_loss(LossKind kind, double a) {
  switch (kind) {
    case LossKind::kNone: return nullptr;
    case LossKind::kHuber: return std::make_unique<ceres::HuberLoss>(a);
    case LossKind::kSoftL1: return std::make_unique<ceres::SoftLOneLoss>(a);
    case LossKind::kCauchy: return std::make_unique<ceres::CauchyLoss>(a);
    case LossKind::kTukey: return std::make_unique<ceres::TukeyLoss>(a);
  }
  return nullptr;
}

}  // namespace rungcal
