// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include <Eigen/Dense>

#include "rungcal/calibration/apply.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// The covariance of the host distance moduli of one apply run, for a downstream fit (a
// Hubble-constant fit, say). Hosts that share one calibration share its errors: a host's
// modulus is the weighted mean of its stars,
//   mu_h = sum_i w_i (m_i - g_i . theta) / sum_i w_i = mbar_h - gbar_h . theta,
// linear in the calibration parameters theta (alpha, beta, beta_long, gamma) with the
// weighted-mean gradient gbar_h. Linear propagation (JCGM 102:2011, the law of propagation
// of uncertainty for several outputs, U_y = C_x U_x C_x^T, exact for a linear model) with the
// stars' magnitudes independent of each other and of theta gives three terms:
//   statistical  V_stat(h, k) = delta_hk S_h^2 / sum_{i in h} w_i   (S_h:
//   HostDistance::error_scale) calibration  V_cal(h, k)  = gbar_h^T C gbar_k                    (C:
//   parameter_covariance) systematic   V_sys(h, k)  = sum_v delta_v(h) delta_v(k) (delta_v:
//   grid_systematics.hpp)
// and V = V_stat + V_cal + V_sys. Its diagonal is each host's stat_error^2,
// calibration_error^2 and systematic_error^2. The calibration term is what the stars'
// shared theta adds: check it by drawing theta from N(theta_hat, C) and recomputing every
// host's mean (tests/apply_test.cpp).
struct HostCovariance {
  std::vector<std::string> hosts;  // the order of rows and columns (ApplyResult::hosts)
  Eigen::MatrixXd statistical, calibration, systematic;  // mag^2

  Eigen::MatrixXd total() const { return statistical + calibration + systematic; }
};

HostCovariance host_covariance(const ApplyResult& result);

// The covariance as a table (docs/file-formats.md, "Distances"): one row per ordered pair of
// hosts, row-major (row a * n + b is hosts a and b), so the columns reshape to n x n matrices:
// host_a, host_b, index_a, index_b, cov_stat, cov_cal, cov_sys, cov_total (mag^2), corr_total.
StarTable host_covariance_table(const HostCovariance& covariance);

}  // namespace rungcal
