// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>
#include <vector>

namespace rungcal {

// One band's time series: times in days (any zero; the periodogram does not depend on it),
// magnitudes and their errors (> 0).
struct TimeSeries {
  std::vector<double> t;
  std::vector<double> y;
  std::vector<double> dy;
  std::size_t size() const { return t.size(); }
};

// A uniform grid of frequencies in cycles per day: f_k = first + k step, k < count.
struct FrequencyGrid {
  double first = 0;
  double step = 0;
  std::size_t count = 0;
  double at(std::size_t k) const { return first + step * static_cast<double>(k); }
  double last() const { return at(count - 1); }
};

// The grid that samples every peak of a baseline T (peak width ~ 1/T) with `oversampling`
// points: step 1/(oversampling T), from 1/max_period to 1/min_period (both included when
// they fall on the grid). The usual choice (VanderPlas 2018, ApJS 236, 16, section 7.1).
FrequencyGrid frequency_grid(double baseline_d, double min_period_d, double max_period_d,
                             double oversampling);

// Generalised (floating-mean) Lomb-Scargle power, Zechmeister & Kuerster 2009 (A&A 496,
// 577, eqs. 4-20), with w_i = (1/sigma_i^2) / sum(1/sigma^2):
//   p(f) = (SS YC^2 + CC YS^2 - 2 CS YC YS) / (YY (CC SS - CS^2)), in [0, 1],
// the "standard" normalisation of astropy.timeseries.LombScargle with fit_mean=True.
// The trigonometric terms of every frequency come from a rotation recurrence over the
// uniform grid (re-seeded with exact sines every few thousand steps), so no sine is
// evaluated inside the loop; the loop over epochs is vectorised.
std::vector<double> lomb_scargle_power(const TimeSeries& series, const FrequencyGrid& grid);

// Multi-harmonic, multi-band power with one shared frequency: each band b has its own mean
// and `harmonics` Fourier terms (Schwarzenberg-Czerny 1996, ApJ 460, L107, for one band;
// VanderPlas & Ivezic 2015, ApJ 812, 18, with no shared base terms, for several):
//   p(f) = 1 - sum_b chi2_b(f) / sum_b chi2_b,0, chi2_b,0 = sum w (y - <y>_w)^2.
// For one band and one harmonic it equals lomb_scargle_power; for one band and K harmonics
// it equals astropy's LombScargle(nterms=K) standard power.
std::vector<double> multiband_power(const std::vector<TimeSeries>& bands, const FrequencyGrid& grid,
                                    int harmonics);

// The sub-harmonic ambiguity of a multi-harmonic search: a curve of frequency k f fits H
// harmonics at f as well, as their k-th (a near-sinusoid ties at 2P and 3P with P). The
// fundamental is the largest multiple k f (k = H down to 2, k f up to max_frequency) whose
// nested model, floor(H / k) harmonics at k f, loses to H harmonics at f by less than the
// Bayesian information criterion charges for the extra terms (Schwarz 1978, Ann. Stat. 6,
// 461; as the stage's Fourier orders are chosen):
//   chi2(k f, floor(H / k)) - chi2(f, H) < 2 B (H - floor(H / k)) ln N,
// B bands, N epochs in all, chi2 = (1 - p) sum_b chi2_b,0 from multiband_power, each
// frequency at the best of a fine grid across its search grid cell (f is known to +- step / 2,
// so k f to +- k step / 2). Returns f itself when no multiple qualifies or H = 1.
double fundamental_frequency(const std::vector<TimeSeries>& bands, double f, double grid_step,
                             int harmonics, double max_frequency);

// False-alarm probability of a peak of standard-normalised single-harmonic power z over
// frequencies up to f_max, by the Baluev (2008, MNRAS 385, 1279) approximation as
// astropy computes it (LombScargle.false_alarm_probability, method "baluev"):
//   FAP = 1 - (1 - (1-z)^((N-3)/2)) exp(-tau),
//   tau = gamma(N-1) W (1-z)^((N-4)/2) sqrt((N-1) z / 2), W = f_max sqrt(4 pi Var_w(t)),
//   gamma(n) = sqrt(2/n) Gamma(n/2) / Gamma((n-1)/2).
double false_alarm_probability(double z, const TimeSeries& series, double max_frequency);

}  // namespace rungcal
