// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include <Eigen/Dense>

#include "rungcal/lightcurve/periodogram.hpp"

namespace rungcal {

// One band's Fourier light curve of order K about a reference time t_ref:
//   m(t) = m0 + sum_{k=1..K} a_k cos(2 pi k f (t - t_ref)) + b_k sin(2 pi k f (t - t_ref)),
// coefficients ordered [m0, a_1, b_1, ..., a_K, b_K].
struct FourierCurve {
  int order = 0;
  Eigen::VectorXd coefficients;
  Eigen::MatrixXd covariance;  // of the coefficients (scaled by chi2/dof when that exceeds 1)
  std::size_t points = 0;
  double chi2 = 0;  // sum ((y - m) / sigma)^2
  double rms = 0;   // unweighted residual scatter, mag

  // Magnitude at a phase (cycles since t_ref).
  double magnitude_at_phase(double phase) const;
};

// Weighted linear least squares at a fixed frequency (covariance from the normal matrix).
FourierCurve fit_fourier_fixed(const TimeSeries& series, double frequency, double t_ref, int order);

// The order K in 1..max_order that minimises BIC = chi2 + (2K + 1) ln N at a fixed
// frequency (Schwarz 1978), among orders that leave at least `min_dof` degrees of freedom;
// 0 when not even K = 1 does.
int order_by_bic(const TimeSeries& series, double frequency, double t_ref, int max_order,
                 int min_dof);

// A joint fit of several bands with one shared frequency.
struct LightCurveFit {
  double frequency = 0;      // cycles per day
  double frequency_err = 0;  // from the covariance (scaled by chi2/dof when that exceeds 1)
  double t_ref = 0;
  std::vector<FourierCurve> bands;
  double chi2 = 0;
  int dof = 0;
  bool converged = false;
  int iterations = 0;
  std::string message;  // Ceres' termination message
};

// Refines the frequency and all bands' coefficients together by non-linear least squares
// (Ceres, Levenberg-Marquardt, analytic Jacobian), starting from the linear fits at
// `frequency`. orders[b] is band b's Fourier order.
LightCurveFit refine_light_curve(const std::vector<TimeSeries>& bands,
                                 const std::vector<int>& orders, double frequency, double t_ref);

// What a light curve tells about its star in one band.
struct CurveMeasures {
  double intensity_mean = 0;      // <m> = -2.5 log10 int_0^1 10^(-0.4 m(phi)) dphi
  double intensity_mean_err = 0;  // from the coefficient covariance
  double magnitude_mean = 0;      // m0 (the magnitude-averaged mean)
  double magnitude_mean_err = 0;
  double amplitude = 0;     // peak to peak of the model, mag
  double phase_of_max = 0;  // phase (cycles from t_ref, in [-0.5, 0.5)) of maximum light
  double epoch_of_max = 0;  // t_ref + phase_of_max / f, in the series' time scale
  // Fourier parameters in the sine series m = A0 + sum A_k sin(2 pi k phi + phi_k) (Simon &
  // Lee 1981, ApJ 248, 291): R_k1 = A_k / A_1, phi_k1 = phi_k - k phi_1 mod 2 pi in [0, 2 pi).
  // NaN when the order is below k.
  double r21 = 0, r21_err = 0, phi21 = 0, phi21_err = 0;
  double r31 = 0, r31_err = 0, phi31 = 0, phi31_err = 0;
};

// Measures of a fitted curve. The intensity mean is integrated by the rectangle rule over
// 512 phases (spectrally accurate for a smooth periodic integrand); its error propagates the
// covariance through d<m>/dc_j = int F b_j dphi / int F dphi, F = 10^(-0.4 m), b_j the
// basis functions.
CurveMeasures measure_curve(const FourierCurve& curve, double frequency, double t_ref);

// -2.5 log10 I0(0.4 ln(10) A): the intensity mean minus m0 of a pure sinusoid of
// semi-amplitude A (exact; I0 the modified Bessel function of order 0).
double sinusoid_intensity_offset(double semi_amplitude);

}  // namespace rungcal
