// SPDX-License-Identifier: MIT
#include "rungcal/plfit/priors.hpp"

#include <cmath>

#include <fmt/format.h>
#include <Eigen/Cholesky>

namespace rungcal {
namespace {

bool correlated_anchors(const FitSettings& s) {
  return s.terms.n_anchors > 1 && s.anchor_prior_correlation.rows() == s.terms.n_anchors;
}

bool is_anchor(const FitSettings& s, const ParameterLayout& L, int j) {
  return correlated_anchors(s) && j >= L.anchor0 && j < L.anchor0 + s.terms.n_anchors;
}

// The anchors' prior sigmas (anchor order).
Eigen::VectorXd anchor_sigmas(const FitSettings& s, const ParameterLayout& L) {
  Eigen::VectorXd sigma(s.terms.n_anchors);
  for (int g = 0; g < s.terms.n_anchors; ++g)
    sigma[g] = s.params[static_cast<std::size_t>(L.anchor0 + g)].prior_sigma;
  return sigma;
}

// C = S R S, R empty: the identity.
Eigen::MatrixXd covariance_of(const Eigen::VectorXd& sigma, const Eigen::MatrixXd& R) {
  const Eigen::Index n = sigma.size();
  const Eigen::MatrixXd corr = R.rows() == n ? R : Eigen::MatrixXd::Identity(n, n);
  return sigma.asDiagonal() * corr * sigma.asDiagonal();
}

}  // namespace

std::vector<PriorRow> prior_rows(const FitSettings& s, const ParameterLayout& L) {
  std::vector<PriorRow> rows;
  for (int j = 0; j < L.size; ++j) {
    const ParamSpec& p = s.params[static_cast<std::size_t>(j)];
    if (p.mode == ParamMode::kPrior && !is_anchor(s, L, j))
      rows.push_back({{j}, {1.0 / p.prior_sigma}});
  }
  if (!correlated_anchors(s)) return rows;
  const int n = s.terms.n_anchors;
  const Eigen::MatrixXd Linv = prior_whitener(anchor_sigmas(s, L), s.anchor_prior_correlation);
  for (int k = 0; k < n; ++k) {
    PriorRow row;
    for (int g = 0; g <= k; ++g) {
      if (s.params[static_cast<std::size_t>(L.anchor0 + g)].mode != ParamMode::kPrior) continue;
      row.params.push_back(L.anchor0 + g);
      row.weights.push_back(Linv(k, g));
    }
    rows.push_back(std::move(row));
  }
  return rows;
}

double prior_residual(const PriorRow& row, const FitSettings& s, const double* t) {
  double z = 0;
  for (std::size_t k = 0; k < row.params.size(); ++k) {
    const int j = row.params[k];
    z += row.weights[k] * (t[j] - s.params[static_cast<std::size_t>(j)].value);
  }
  return z;
}

void redraw_prior_centres(FitSettings& s, const ParameterLayout& L, Random& rng) {
  for (int j = 0; j < L.size; ++j) {
    ParamSpec& p = s.params[static_cast<std::size_t>(j)];
    if (p.mode == ParamMode::kPrior && !is_anchor(s, L, j))
      p.value = rng.normal(p.value, p.prior_sigma);
  }
  if (!correlated_anchors(s)) return;
  const int n = s.terms.n_anchors;
  const Eigen::MatrixXd lower =
      Eigen::LLT<Eigen::MatrixXd>(covariance_of(anchor_sigmas(s, L), s.anchor_prior_correlation))
          .matrixL();
  Eigen::VectorXd x(n);
  for (int g = 0; g < n; ++g) x[g] = rng.normal();
  const Eigen::VectorXd shift = lower * x;
  for (int g = 0; g < n; ++g) s.params[static_cast<std::size_t>(L.anchor0 + g)].value += shift[g];
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
