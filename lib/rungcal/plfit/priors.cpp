// SPDX-License-Identifier: MIT
#include "rungcal/plfit/priors.hpp"

#include <cmath>

#include <fmt/format.h>
#include <Eigen/Cholesky>

namespace rungcal {
namespace {

bool correlated_anchors(const AnchorBlock& a) {
  return a.count > 1 && a.correlation.rows() == a.count;
}

bool is_anchor(const AnchorBlock& a, int j) {
  return correlated_anchors(a) && j >= a.first && j < a.first + a.count;
}

// The anchors' prior sigmas (anchor order).
Eigen::VectorXd anchor_sigmas(const std::vector<ParamSpec>& params, const AnchorBlock& a) {
  Eigen::VectorXd sigma(a.count);
  for (int g = 0; g < a.count; ++g)
    sigma[g] = params[static_cast<std::size_t>(a.first + g)].prior_sigma;
  return sigma;
}

AnchorBlock anchors_of(const FitSettings& s, const ParameterLayout& L) {
  return {L.anchor0, s.terms.n_anchors - s.terms.n_clusters, s.anchor_prior_correlation};
}

// C = S R S, R empty: the identity.
Eigen::MatrixXd covariance_of(const Eigen::VectorXd& sigma, const Eigen::MatrixXd& R) {
  const Eigen::Index n = sigma.size();
  const Eigen::MatrixXd corr = R.rows() == n ? R : Eigen::MatrixXd::Identity(n, n);
  return sigma.asDiagonal() * corr * sigma.asDiagonal();
}

}  // namespace

std::vector<PriorRow> prior_rows(const std::vector<ParamSpec>& params, const AnchorBlock& anchors) {
  std::vector<PriorRow> rows;
  for (std::size_t j = 0; j < params.size(); ++j) {
    const ParamSpec& p = params[j];
    if (p.mode == ParamMode::kPrior && !is_anchor(anchors, static_cast<int>(j)))
      rows.push_back({{static_cast<int>(j)}, {1.0 / p.prior_sigma}});
  }
  if (!correlated_anchors(anchors)) return rows;
  const Eigen::MatrixXd Linv = prior_whitener(anchor_sigmas(params, anchors), anchors.correlation);
  for (int k = 0; k < anchors.count; ++k) {
    PriorRow row;
    for (int g = 0; g <= k; ++g) {
      if (params[static_cast<std::size_t>(anchors.first + g)].mode != ParamMode::kPrior) continue;
      row.params.push_back(anchors.first + g);
      row.weights.push_back(Linv(k, g));
    }
    rows.push_back(std::move(row));
  }
  return rows;
}

std::vector<PriorRow> prior_rows(const FitSettings& s, const ParameterLayout& L) {
  return prior_rows(s.params, anchors_of(s, L));
}

double prior_residual(const PriorRow& row, const std::vector<ParamSpec>& params, const double* t) {
  double z = 0;
  for (std::size_t k = 0; k < row.params.size(); ++k) {
    const int j = row.params[k];
    z += row.weights[k] * (t[j] - params[static_cast<std::size_t>(j)].value);
  }
  return z;
}

double prior_residual(const PriorRow& row, const FitSettings& s, const double* t) {
  return prior_residual(row, s.params, t);
}

void redraw_prior_centres(std::vector<ParamSpec>& params, const AnchorBlock& anchors, Random& rng) {
  for (std::size_t j = 0; j < params.size(); ++j) {
    ParamSpec& p = params[j];
    if (p.mode == ParamMode::kPrior && !is_anchor(anchors, static_cast<int>(j)))
      p.value = rng.normal(p.value, p.prior_sigma);
  }
  if (!correlated_anchors(anchors)) return;
  const int n = anchors.count;
  const Eigen::MatrixXd lower =
      Eigen::LLT<Eigen::MatrixXd>(
          covariance_of(anchor_sigmas(params, anchors), anchors.correlation))
          .matrixL();
  Eigen::VectorXd x(n);
  for (int g = 0; g < n; ++g) x[g] = rng.normal();
  const Eigen::VectorXd shift = lower * x;
  for (int g = 0; g < n; ++g) params[static_cast<std::size_t>(anchors.first + g)].value += shift[g];
}

void redraw_prior_centres(FitSettings& s, const ParameterLayout& L, Random& rng) {
  redraw_prior_centres(s.params, anchors_of(s, L), rng);
}

Eigen::MatrixXd prior_whitener(const Eigen::VectorXd& sigma, const Eigen::MatrixXd& correlation) {
  const Eigen::Index n = sigma.size();
  return Eigen::LLT<Eigen::MatrixXd>(covariance_of(sigma, correlation))
      .matrixL()
      .solve(Eigen::MatrixXd::Identity(n, n));
}

std::string check_anchor_covariance(const Eigen::MatrixXd& C, int n) {
  if (C.rows() != n || C.cols() != n)
    return fmt::format(
        "anchor_covariance: must be {0} x {0}, a row and a column per [[anchor]] in their order, "
        "not {1} x {2}",
        n, C.rows(), C.cols());
  const double scale = C.cwiseAbs().maxCoeff();
  for (int i = 0; i < n; ++i) {
    if (!(C(i, i) > 0))
      return fmt::format("anchor_covariance: the diagonal must be positive (row {} has {})", i + 1,
                         C(i, i));
    for (int k = 0; k < i; ++k)
      if (std::abs(C(i, k) - C(k, i)) > 1e-9 * scale)
        return fmt::format(
            "anchor_covariance: must be symmetric (row {}, column {} is {} but row {}, column {} "
            "is {})",
            i + 1, k + 1, C(i, k), k + 1, i + 1, C(k, i));
  }
  const Eigen::MatrixXd R = correlation_of(C);
  Eigen::LLT<Eigen::MatrixXd> llt(R);
  if (llt.info() != Eigen::Success || Eigen::MatrixXd(llt.matrixL()).diagonal().minCoeff() < 1e-6)
    return "anchor_covariance: must be positive definite (no anchor's modulus may be fixed by the "
           "others')";
  return "";
}

Eigen::MatrixXd correlation_of(const Eigen::MatrixXd& C) {
  const Eigen::VectorXd inv = C.diagonal().cwiseSqrt().cwiseInverse();
  return inv.asDiagonal() * C * inv.asDiagonal();
}

}  // namespace rungcal
