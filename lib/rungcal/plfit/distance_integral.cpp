// SPDX-License-Identifier: MIT
#include "rungcal/plfit/distance_integral.hpp"

#include <map>
#include <mutex>

#include "rungcal/plfit/hierarchical.hpp"

namespace rungcal::hier {

const Quadrature& quadrature(int n) {
  static std::mutex mutex;
  static std::map<int, Quadrature> cache;
  std::lock_guard<std::mutex> lock(mutex);
  auto it = cache.find(n);
  if (it != cache.end()) return it->second;
  Quadrature q;
  std::vector<double> x, w;
  gauss_hermite(n, x, w);
  for (std::size_t k = 0; k < x.size(); ++k) {
    q.nodes.push_back(std::numbers::sqrt2 * x[k]);
    q.log_weight.push_back(std::log(w[k]) + x[k] * x[k]);
  }
  return cache.emplace(n, std::move(q)).first->second;
}

StarIntegrals::StarIntegrals(int nodes, std::size_t stars)
    : member_rule(quadrature(nodes)),
      blend_rule(quadrature(blend_nodes(nodes))),
      mode_member(stars, std::numeric_limits<double>::quiet_NaN()),
      mode_outlier(mode_member),
      mode_blend(mode_member) {}

}  // namespace rungcal::hier
