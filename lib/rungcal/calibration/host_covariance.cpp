// SPDX-License-Identifier: MIT
#include "rungcal/calibration/host_covariance.hpp"

#include <cmath>
#include <string>
#include <vector>

#include "rungcal/table/row_table.hpp"

namespace rungcal {

HostCovariance host_covariance(const ApplyResult& r) {
  HostCovariance c;
  const auto n = static_cast<Eigen::Index>(r.hosts.size());
  c.statistical = Eigen::MatrixXd::Zero(n, n);
  c.calibration = Eigen::MatrixXd::Zero(n, n);
  c.systematic = Eigen::MatrixXd::Zero(n, n);
  for (Eigen::Index a = 0; a < n; ++a) {
    const HostDistance& ha = r.hosts[static_cast<std::size_t>(a)];
    c.hosts.push_back(ha.host);
    c.statistical(a, a) = ha.stat_error * ha.stat_error;
    for (Eigen::Index b = 0; b < n; ++b) {
      const HostDistance& hb = r.hosts[static_cast<std::size_t>(b)];
      c.calibration(a, b) = r.covariance.form(ha.gradient, hb.gradient, r.calibration_label);
      double sys = 0;
      for (std::size_t v = 0; v < ha.systematic_shifts.size() && v < hb.systematic_shifts.size();
           ++v)
        sys += ha.systematic_shifts[v] * hb.systematic_shifts[v];
      c.systematic(a, b) = sys;
    }
  }
  return c;
}

StarTable host_covariance_table(const HostCovariance& c) {
  struct Entry {
    std::string host_a, host_b;
    Eigen::Index a, b;
    double stat, cal, sys, total, corr;
  };
  const Eigen::MatrixXd total = c.total();
  const auto n = static_cast<Eigen::Index>(c.hosts.size());
  std::vector<Entry> entries;
  for (Eigen::Index a = 0; a < n; ++a)
    for (Eigen::Index b = 0; b < n; ++b) {
      const double d = std::sqrt(total(a, a) * total(b, b));
      entries.push_back({c.hosts[static_cast<std::size_t>(a)], c.hosts[static_cast<std::size_t>(b)],
                         a, b, c.statistical(a, b), c.calibration(a, b), c.systematic(a, b),
                         total(a, b), d > 0 ? total(a, b) / d : std::nan("")});
    }
  using E = Entry;
  return table_from_rows<E>(
      {text_column<E>("host_a", "", [](const E& e) { return e.host_a; }),
       text_column<E>("host_b", "", [](const E& e) { return e.host_b; }),
       integer_column<E>("index_a", "0-based row of host_a in the matrix",
                         [](const E& e) { return e.a; }),
       integer_column<E>("index_b", "0-based column of host_b in the matrix",
                         [](const E& e) { return e.b; }),
       real_column<E>("cov_stat", "mag2", "statistical: the host's own stars (diagonal)",
                      [](const E& e) { return e.stat; }),
       real_column<E>("cov_cal", "mag2", "calibration, every prior included: shared by all hosts",
                      [](const E& e) { return e.cal; }),
       real_column<E>("cov_sys", "mag2", "systematics grid: shared by all hosts",
                      [](const E& e) { return e.sys; }),
       real_column<E>("cov_total", "mag2", "the sum of the three",
                      [](const E& e) { return e.total; }),
       real_column<E>("corr_total", "", "cov_total / sqrt(cov_total(a,a) cov_total(b,b))",
                      [](const E& e) { return e.corr; })},
      entries);
}

}  // namespace rungcal
