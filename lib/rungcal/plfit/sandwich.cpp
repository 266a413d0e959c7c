// SPDX-License-Identifier: MIT
#include "rungcal/plfit/sandwich.hpp"

#include <cmath>
#include <limits>
#include <vector>

#include <Eigen/Dense>

#include "rungcal/plfit/priors.hpp"

namespace rungcal {

double loss_second_derivative(LossKind kind, double a, double s) {
  const double b = a * a;
  switch (kind) {
    case LossKind::kNone:
      return 0.0;
    case LossKind::kHuber:
      return s > b ? -a / (2.0 * s * std::sqrt(s)) : 0.0;
    case LossKind::kSoftL1: {
      const double t = 1.0 + s / b;
      return -0.5 / (b * t * std::sqrt(t));
    }
    case LossKind::kCauchy: {
      const double t = 1.0 + s / b;
      return -1.0 / (b * t * t);
    }
    case LossKind::kTukey:
      return s > b ? 0.0 : -2.0 * (1.0 - s / b) / b;
  }
  return 0.0;
}

namespace {

// The rows' multiplicities in the order star_residuals returns them.
Eigen::ArrayXd row_weights(const FitData& d) {
  Eigen::ArrayXd w = Eigen::ArrayXd::Ones(d.stars());
  Eigen::Index at = 0;
  for (const FitData::Common* c : {&d.parallax, &d.known, &d.anchor}) {
    if (c->weight.size()) w.segment(at, c->size()) = c->weight;
    at += c->size();
  }
  return w;
}

// Central-difference step for parameter j: relative to its size, never below 1e-6.
double step_for(double v) { return 1e-5 * std::max(1.0, std::abs(v)); }

}  // namespace

bool sandwich_covariance(const FitData& d, const FitSettings& s, const ParameterLayout& L,
                         const Eigen::VectorXd& theta, const Eigen::MatrixXd& model_covariance,
                         Eigen::MatrixXd& covariance) {
  std::vector<int> free;
  for (int j = 0; j < L.size; ++j)
    if (j != L.sigma && s.params[static_cast<std::size_t>(j)].mode != ParamMode::kFixed)
      free.push_back(j);
  const auto P = static_cast<Eigen::Index>(free.size());
  const Eigen::Index n = d.stars();
  const Eigen::ArrayXd r = star_residuals(d, s, L, theta).r;
  if (!r.allFinite()) return false;
  Eigen::MatrixXd grad(n, P);
  for (Eigen::Index k = 0; k < P; ++k) {
    const int j = free[static_cast<std::size_t>(k)];
    const double h = step_for(theta[j]);
    Eigen::VectorXd up = theta, down = theta;
    up[j] += h, down[j] -= h;
    grad.col(k) =
        (star_residuals(d, s, L, up).r - star_residuals(d, s, L, down).r).matrix() / (2.0 * h);
  }
  if (!grad.allFinite()) return false;
  const Eigen::ArrayXd w = row_weights(d);
  Eigen::ArrayXd curvature(n), score(n);
  for (Eigen::Index i = 0; i < n; ++i) {
    const double sq = r[i] * r[i];
    double rho = 0, rho1 = 0;
    loss_terms(s.loss, s.loss_scale, sq, rho, rho1);
    curvature[i] = w[i] * (rho1 + 2.0 * loss_second_derivative(s.loss, s.loss_scale, sq) * sq);
    score[i] = std::sqrt(w[i]) * rho1 * r[i];
  }
  Eigen::MatrixXd A = grad.transpose() * curvature.matrix().asDiagonal() * grad;
  const Eigen::MatrixXd scored = score.matrix().asDiagonal() * grad;
  Eigen::MatrixXd B = scored.transpose() * scored;
  // Each whitened prior row w adds w w^T over the free parameters to both A and B.
  std::vector<Eigen::Index> column(static_cast<std::size_t>(L.size), -1);
  for (Eigen::Index k = 0; k < P; ++k)
    column[static_cast<std::size_t>(free[static_cast<std::size_t>(k)])] = k;
  for (const PriorRow& row : prior_rows(s, L)) {
    Eigen::VectorXd whitened = Eigen::VectorXd::Zero(P);
    for (std::size_t k = 0; k < row.params.size(); ++k)
      if (const Eigen::Index c = column[static_cast<std::size_t>(row.params[k])]; c >= 0)
        whitened[c] = row.weights[k];
    A += whitened * whitened.transpose();
    B += whitened * whitened.transpose();
  }
  Eigen::FullPivLU<Eigen::MatrixXd> lu(A);
  if (!lu.isInvertible()) return false;
  const Eigen::MatrixXd Ainv = lu.inverse();
  const Eigen::MatrixXd sandwich = Ainv * B * Ainv;
  if (!sandwich.allFinite()) return false;
  covariance = Eigen::MatrixXd::Zero(L.size, L.size);
  for (Eigen::Index a = 0; a < P; ++a)
    for (Eigen::Index b = 0; b < P; ++b) covariance(free[a], free[b]) = sandwich(a, b);
  if (L.sigma >= 0 && model_covariance.rows() == L.size)
    covariance(L.sigma, L.sigma) = model_covariance(L.sigma, L.sigma);
  return true;
}

}  // namespace rungcal
