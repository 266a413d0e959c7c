// SPDX-License-Identifier: MIT
#include "rungcal/photometry/photometry.hpp"

#include <cmath>

namespace rungcal {

double distance_modulus_from_parsec(double distance_pc) {
  return 5.0 * std::log10(distance_pc / 10.0);
}

double parsec_from_distance_modulus(double mu) { return 10.0 * std::pow(10.0, 0.2 * mu); }

double parallax_mas_from_magnitudes(double m0, double absolute_mag) {
  return std::pow(10.0, -0.2 * (m0 - absolute_mag - 10.0));
}

double distance_modulus_from_parallax_mas(double parallax_mas) {
  return 5.0 * std::log10(100.0 / parallax_mas);
}

double sinusoid_intensity_mean_offset(double amplitude_mag) {
  return -2.5 * std::log10(std::cyl_bessel_i(0.0, 0.4 * std::log(10.0) * amplitude_mag));
}

double fundamentalized_period(double first_overtone_period) {
  return first_overtone_period / (0.716 - 0.027 * std::log10(first_overtone_period));
}

double fundamentalized_log_period(const std::string& pulsator_class, const std::string& mode,
                                  double log_period) {
  if (mode != "first_overtone") return log_period;
  if (pulsator_class == "rr_lyrae") return log_period + kRRLyraeOvertoneLogShift;
  return std::log10(fundamentalized_period(std::pow(10.0, log_period)));
}

double first_overtone_period_for(double fundamental_period) {
  double p1 = 0.716 * fundamental_period;
  for (int i = 0; i < 50; ++i) p1 = fundamental_period * (0.716 - 0.027 * std::log10(p1));
  return p1;
}

}  // namespace rungcal
