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

ParallaxAtModulus parallax_at_modulus(double plx, double var, double mu, double offset) {
  const double p = std::exp(-kC * (mu - 10.0)), r = plx - p - offset;
  ParallaxAtModulus o;
  o.log_l = -0.5 * (r * r / var + kLog2Pi + std::log(var));
  o.d_off = r / var;
  o.d_mu = o.d_off * -kC * p;  // dp/dmu = -0.2 ln10 p
  o.d_var = 0.5 * (r * r / var - 1.0) / var;
  return o;
}

ParallaxAtModulus powered_parallax_at_modulus(double plx, double var, double mu, double offset,
                                              int power) {
  ParallaxAtModulus o = parallax_at_modulus(plx, var, mu, offset);
  if (power == 0) return o;
  const double p = std::exp(-kC * (mu - 10.0)), r = plx - p - offset;
  o.log_l += power * std::log(r * r / var) - outlier_parallax_log_norm(power);
  o.d_var -= power / var;
  if (r != 0.0) {  // at r = 0 the term is -infinity and its weight in the mixture zero
    o.d_off -= 2.0 * power / r;
    o.d_mu += 2.0 * power * kC * p / r;  // d r / d mu = 0.2 ln10 p
  }
  return o;
}

double group_parallax_log_l(const std::vector<FitData::GroupParallax>& groups, const double* mu,
                            double offset, double* d_mu, double& d_off) {
  double log_l = 0;
  for (std::size_t g = 0; g < groups.size(); ++g) {
    if (!(groups[g].var > 0) || groups[g].weight == 0) continue;
    const ParallaxAtModulus t = parallax_at_modulus(groups[g].plx, groups[g].var, mu[g], offset);
    log_l += groups[g].weight * t.log_l;
    d_mu[g] += groups[g].weight * t.d_mu;
    d_off += groups[g].weight * t.d_off;
  }
  return log_l;
}

}  // namespace rungcal::hier
