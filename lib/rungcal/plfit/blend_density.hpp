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

// Either law at many residuals r for one variance and scale, as a star's quadrature needs it:
// what does not depend on r is computed once (the functions above are this, for one r).
class BlendLaw {
 public:
  BlendLaw(double var, double scale, bool rising);  // scale: the mean brightening s
  BlendDensity at(double r) const;

 private:
  double var_, sd_, theta_, lambda_;  // theta: the exponential's scale (s, or s / 2 rising)
  bool rising_;
  double log_norm_ = 0;  // ln p's terms free of r
};

// A blend whose brightening differs between bands, as the joint fit sees it after reducing a
// star's bands to one magnitude (joint_hierarchical.hpp): the brightening b in the first
// relation's band moves the reduced magnitude by kappa b and leaves a colour residual whose
// log-likelihood is -tilt b - curvature b^2 / 2. With kappa = 1 and the other two 0 the blend
// is grey and the density is blend_log_density's or blend_rising_log_density's.
struct BlendColour {
  double kappa = 1.0;      // the reduced magnitude's brightening per unit b
  double curvature = 0.0;  // D >= 0: how fast the colour residual grows with b
  double tilt = 0.0;       // t: the colour residual's slope in b at b = 0
};
struct ColouredBlendDensity : BlendDensity {
  double d_kappa = 0, d_curvature = 0, d_tilt = 0;
};
// The density of the reduced residual r,
//   p(r) = lambda^(1+k) / k! int_0^inf b^k N(r + kappa b | 0, V) exp(-(lambda + t) b - D b^2 / 2)
//   db,
// k = 0 (Exp(mean s), lambda = 1 / s) or k = 1 (rising: Gamma(2, mean s), lambda = 2 / s).
// Completing the square in b with A = kappa^2 / V + D, B = kappa r / V + lambda + t and
// z = -B / sqrt(A), int_0^inf exp(-A b^2/2 - B b) db = sqrt(2 pi / A) exp(z^2/2) Phi(z) and
// int_0^inf b exp(...) db = that times (z + psi) / sqrt(A) (derived in docs/method.md, "Coloured
// blends"; tested against quadrature in tests/blend_density_test.cpp):
//   ln p = (1+k) ln lambda - ln(V A) / 2 + (2 kappa r lambda' + lambda'^2 V - D r^2) / (2 V A)
//          + ln Phi(z) + k [ln(z + psi) - ln(A) / 2],   lambda' = lambda + t,
// (the third term is z^2/2 - r^2/(2V) without cancellation), log-concave in r. Derivatives:
// for any argument x, d ln p / dx = -(1+k) A_x / (2A) + H'(z) z_x plus its explicit terms, with
// H' = z + psi + k (1 - psi (z + psi)) / (z + psi) and z_x = -B_x / sqrt(A) - z A_x / (2A).
ColouredBlendDensity coloured_blend_log_density(double r, double var, double mean,
                                                const BlendColour& colour, bool rising);

// coloured_blend_log_density at many r for one variance, mean and colour (as BlendLaw).
class ColouredBlendLaw {
 public:
  ColouredBlendLaw(double var, double mean, const BlendColour& colour, bool rising);
  ColouredBlendDensity at(double r) const;

 private:
  double var_, mean_, k_rise_, lambda_, lam_, kappa_, curv_, A_, root_a_;
  bool rising_;
  double log_norm_ = 0;  // ln p's terms free of r
};

}  // namespace rungcal
