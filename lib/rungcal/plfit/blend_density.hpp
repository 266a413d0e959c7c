// SPDX-License-Identifier: MIT
#pragma once

// The hierarchical model's blend components' magnitude densities (BlendComponent), in
// closed form with exact derivatives.

namespace rungcal {

// The blend component's magnitude density: a member's residual r = m - mu - M ~ N(0, V),
// made brighter by b ~ Exp(mean s), b >= 0 (blends only brighten), is r - b, with density
// (the exponentially modified Gaussian; Grushka 1972, Anal. Chem. 44, 1733)
//   p(r) = lambda exp(lambda r + lambda^2 V / 2) Phi(z),  z = -(r + lambda V) / sqrt(V),  lambda =
//   1 / s.
// Its log and exact derivatives, with psi = phi(z) / Phi(z) (d ln Phi / dz; d psi / dz =
// -psi (z + psi)): d/dr = lambda - psi / sqrt(V), d2/dr2 = -psi (z + psi) / V (< 0: log-concave),
// d/dV = lambda^2 / 2 + psi (r / V - lambda) / (2 sqrt(V)), d/ds = -lambda^2 (1 / lambda + r +
// lambda V - psi sqrt(V)). ln Phi for z < -30 from its asymptotic series (Abramowitz &
// Stegun 26.2.12), where erfc underflows.
struct BlendDensity {
  double log_density = 0, d_r = 0, d2_r = 0, d_var = 0, d_scale = 0;
};
BlendDensity blend_log_density(double r, double var, double scale);

// BlendComponent::kRising's magnitude density: the brightening b ~ Gamma(shape 2, mean s),
// density b exp(-b / theta) / theta^2 with theta = s / 2, convolved with N(0, V). Completing
// the square as for the exponential (lambda = 1 / theta, same z):
//   p(r) = lambda^2 sqrt(V) exp(lambda r + lambda^2 V / 2) [phi(z) + z Phi(z)]
//        = EMG(r; V, theta) * lambda sqrt(V) (z + psi),
// so ln p = ln EMG + ln(lambda sqrt(V)) + ln A with A = z + psi > 0 (the mean excess of a
// truncated normal), dA/dz = B = 1 - psi A, dB/dz = psi (A^2 - B). Log-concave, as the
// convolution of two log-concave densities. The scale argument is the mean s, as for
// blend_log_density, so the two share one parameter and one prior.
BlendDensity blend_rising_log_density(double r, double var, double mean);

}  // namespace rungcal
