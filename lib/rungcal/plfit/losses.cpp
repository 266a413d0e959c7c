// SPDX-License-Identifier: MIT
#include "rungcal/plfit/losses.hpp"

#include <ceres/loss_function.h>

namespace rungcal {

void evaluate_loss(LossKind kind, double a, const Eigen::ArrayXd& s, Eigen::ArrayXd& rho,
                   Eigen::ArrayXd& rho1) {
  rho.resize(s.size());
  rho1.resize(s.size());
  for (Eigen::Index i = 0; i < s.size(); ++i) loss_terms(kind, a, s[i], rho[i], rho1[i]);
}

std::unique_ptr<ceres::LossFunction> make_ceres_loss(LossKind kind, double a) {
  switch (kind) {
    case LossKind::kNone:
      return nullptr;
    case LossKind::kHuber:
      return std::make_unique<ceres::HuberLoss>(a);
    case LossKind::kSoftL1:
      return std::make_unique<ceres::SoftLOneLoss>(a);
    case LossKind::kCauchy:
      return std::make_unique<ceres::CauchyLoss>(a);
    case LossKind::kTukey:
      return std::make_unique<ceres::TukeyLoss>(a);
  }
  return nullptr;
}

}  // namespace rungcal
