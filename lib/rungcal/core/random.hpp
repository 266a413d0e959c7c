// SPDX-License-Identifier: MIT
#pragma once

#include <cmath>
#include <cstdint>
#include <numbers>
#include <random>

namespace rungcal {

// Deterministic random numbers, identical on every platform for a seed: std::mt19937_64 is
// fully specified by the standard; the distributions are written here because the
// standard library's are not.
class Random {
 public:
  explicit Random(std::uint64_t seed) : engine_(seed) {}
  // Uniform in [0, 1) with 53 random bits.
  double uniform() { return static_cast<double>(engine_() >> 11) * 0x1.0p-53; }
  double uniform(double lo, double hi) { return lo + (hi - lo) * uniform(); }
  // Standard normal by the Box-Muller transform.
  double normal() {
    if (has_spare_) {
      has_spare_ = false;
      return spare_;
    }
    double u1 = 1.0 - uniform(), u2 = uniform();
    double r = std::sqrt(-2.0 * std::log(u1));
    spare_ = r * std::sin(2.0 * std::numbers::pi * u2);
    has_spare_ = true;
    return r * std::cos(2.0 * std::numbers::pi * u2);
  }
  double normal(double mean, double sigma) { return mean + sigma * normal(); }
  // Integer in [0, n).
  std::uint64_t below(std::uint64_t n) {
    return static_cast<std::uint64_t>(uniform() * static_cast<double>(n));
  }
  std::uint64_t next() { return engine_(); }

 private:
  std::mt19937_64 engine_;
  bool has_spare_ = false;
  double spare_ = 0.0;
};

}  // namespace rungcal
