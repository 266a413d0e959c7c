// SPDX-License-Identifier: MIT
#pragma once

#include <string>

namespace rungcal {

// Distance modulus mu = 5 log10(d / 10 pc) (method brief, section 1).
double distance_modulus_from_parsec(double distance_pc);
double parsec_from_distance_modulus(double mu);

// Photometric parallax in mas of a star with dereddened apparent magnitude m0 and absolute
// magnitude M: pi = 10^(-0.2 (m0 - M - 10)) (mu = m0 - M, pi[mas] = 1000 / d[pc]).
double parallax_mas_from_magnitudes(double m0, double absolute_mag);

// Distance modulus of a parallax (mas): mu = 5 log10(100 / pi). Only for pi > 0; biased when
// sigma_pi / pi is not small (use parallax-space fits instead).
double distance_modulus_from_parallax_mas(double parallax_mas);

// Absolute magnitude from apparent (dereddened) magnitude and distance modulus: M = m0 - mu.
inline double absolute_from_apparent(double m0, double mu) { return m0 - mu; }

// Intensity-averaged mean magnitude of a sinusoid m0 + A sin(2 pi phi) relative to m0:
// -2.5 log10 I0(0.4 ln10 A), with I0 the modified Bessel function (method brief, section 5).
double sinusoid_intensity_mean_offset(double amplitude_mag);

// The fundamental-mode period of a first-overtone pulsator (memory: attributed to Feast &
// Catchpole 1997, MNRAS 286, L1): P_F = P_1O / (0.716 - 0.027 log10 P_1O); 1 d -> 1.39665 d.
double fundamentalized_period(double first_overtone_period);
// RR Lyrae first-overtone (RRc) periods: log P_F = log P_1O + 0.127 (common practice; the
// ratio Klein & Bloom 2014, MNRAS 440, L96, Table 1 applies: AE Boo, P = 0.3149 d,
// log(P_F / 0.5285 d) = -0.0979).
inline constexpr double kRRLyraeOvertoneLogShift = 0.127;
// log10 of the fundamental-mode period for a star of a class and mode: Cepheid formula for
// Cepheids, the RR Lyrae shift for RR Lyrae stars, unchanged for fundamental-mode stars.
double fundamentalized_log_period(const std::string& pulsator_class, const std::string& mode,
                                  double log_period);
// Inverse of fundamentalized_period (fixed-point iteration, converges in a few steps).
double first_overtone_period_for(double fundamental_period);

}  // namespace rungcal
