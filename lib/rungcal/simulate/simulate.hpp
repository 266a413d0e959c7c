// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <map>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "rungcal/core/config.hpp"
#include "rungcal/extinction/extinction.hpp"
#include "rungcal/photometry/bands.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// The true period-luminosity relation of one band in a simulation:
// M = alpha + beta (log P_F - pivot) + gamma [Fe/H], plus Gaussian intrinsic scatter.
struct TrueRelation {
  std::string band;
  double alpha = 0;  // absolute magnitude at the pivot
  double beta = 0;   // slope per dex of period
  double gamma = 0;  // metallicity term, mag/dex
  // Intrinsic scatter, mag: `scatter` times one draw per star shared by all bands (the
  // star's place in the instability strip, which is why Wesenheit magnitudes scatter
  // less), plus an independent part per band.
  double scatter = 0;
  double independent_scatter = 0.02;
  double amplitude_ratio = 1.0;  // light-curve amplitude relative to V
};

// A star cluster among the calibrators: members at one true distance, and the cluster's
// mean parallax as a user would take it from the literature (zero point applied).
struct SimulatedCluster {
  std::string name;  // invented; the calibrators' GROUP value
  double mu = 11.0;  // true distance modulus
  int members = 4;   // calibrators in it (numbered after the field calibrators)
};

// An anchor galaxy among the calibrators: Cepheids at one true distance far beyond useful
// parallaxes, and its distance modulus as a user would take it from the literature: the
// truth plus an error drawn with the anchors' correlation (published anchor distances share
// calibration systematics).
struct SimulatedAnchor {
  std::string name;      // invented; the calibrators' GROUP value
  double mu = 18.5;      // true distance modulus
  int members = 20;      // calibrators in it (numbered after the clusters')
  double mu_err = 0.03;  // the published modulus's error (mag)
  double ebv = 0.08;     // mean foreground reddening of its Cepheids (mag)
};

struct SimulateOptions {
  std::uint64_t seed = 1;                 // the whole draw follows from it
  int n_calibrators = 120;                // Milky Way calibrators with parallaxes
  int n_targets = 60;                     // Cepheids in the target galaxy
  int n_lightcurve_stars = 100;           // calibrators that also get light curves (first N)
  double pivot_log_period = 1.0;          // log P0 of the relations
  double first_overtone_fraction = 0.15;  // share of calibrators pulsating in the first overtone
  double outlier_fraction = 0.03;  // share of calibrators made 0.6-1.2 mag too bright (blends)
  double far_fraction = 0.08;      // share placed at 6-15 kpc (noisy, some negative parallaxes)
  double max_distance_kpc = 6.0;   // disk calibrators are spread to this distance
  double ebv_per_kpc = 0.35;       // mean reddening growth with distance, mag/kpc
  double ebv_error = 0.04;         // E(B-V) uncertainty floor, mag
  double feh_mean = 0.0, feh_sigma = 0.15, feh_error = 0.08;  // [Fe/H] truth and its error
  double parallax_zero_point_mas = -0.020;  // Z in observed = true + Z + offset + noise
  double parallax_offset_mas = -0.010;      // the residual offset a fit should find
  double parallax_error_floor_mas = 0.018;  // error of the brightest stars; grows with G
  double release2_error_factor = 0.7;       // a second data release's parallax errors (0: none)
  double mag_error = 0.015;                 // photometric error of calibrator mean magnitudes
  ExtinctionLaw law = ExtinctionLaw::kF99;  // law reddening the simulated stars
  double r_v = 3.1;
  std::vector<TrueRelation> relations;  // one per catalog band
  std::vector<std::string> lightcurve_bands = {"V", "I", "Ks"};
  std::map<std::string, int> lightcurve_epochs = {{"V", 60}, {"I", 40}, {"Ks", 25}};
  double lightcurve_error = 0.012;                      // per-epoch photometric error
  std::string observatory = "Halden Peak Observatory";  // invented, for the demo headers
  std::string calibrator_prefix = "HPO-C";
  std::string target_galaxy = "Veyra Spiral";  // invented target galaxy
  std::string target_prefix = "VEY-";
  double target_mu = 29.35;  // true distance modulus of the target galaxy
  double target_ebv = 0.08;  // mean foreground + host reddening of targets
  std::vector<std::string> target_bands = {"V", "I", "H"};
  double target_mag_error = 0.06;
  std::vector<SimulatedCluster> clusters;     // [[cluster]]: drawn from their own stream
  double cluster_parallax_error_mas = 0.006;  // error of a cluster's mean parallax
  std::string field_group = "Milky Way";      // GROUP of the calibrators outside clusters
  std::vector<SimulatedAnchor> anchors;       // [[anchor]]: drawn from their own stream
  // Correlation of the anchors' published moduli errors, one for every pair (a shared
  // systematic; 0: independent).
  double anchor_correlation = 0.0;
  std::string bands_file;  // band table (wavelengths for the law)
  std::string output_folder = "sample_data";

  std::string check() const;
};

SimulateOptions simulate_options_from_file(const std::string& path);

// What the simulator drew: the products and the truth behind them.
struct Simulation {
  StarTable calibrators;           // catalog in the invented observatory's own column names
  StarTable calibrators_release2;  // the same stars, parallaxes of a later data release
  StarTable light_curves;          // star, time_bjd_tdb, band, mag, mag_err
  StarTable targets;               // target-galaxy Cepheids
  StarTable
      truth_stars;  // per calibrator: true distance, E(B-V), [Fe/H], absolute magnitudes, flags
  nlohmann::json truth;  // parameters (relations, Wesenheit truths, zero point, offset, target mu)
};

Simulation simulate(const SimulateOptions& options, const BandTable& bands);
// Writes calibrators.fits (and calibrators_release2.fits), lightcurves.csv, targets.csv,
// truth_stars.csv, truth.json.
void write_simulation(const Simulation& sim, const std::string& folder);

}  // namespace rungcal
