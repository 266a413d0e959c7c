// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <map>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/simulate/mock_catalog.hpp"

namespace rungcal {

// A simulation study of the fit: many mock catalogs of one scenario, each fitted as a user
// would, summarised per parameter against the truth (method brief, section 4b: bias in
// units of the reported error, and the coverage of the 68% intervals).
struct StudyOptions {
  MockScenario scenario;  // the mocks' truth and contaminations; seed of the first mock
  int mocks = 100;        // catalogs drawn (mock k uses seed + k)
  FitOptions fit;         // the fit each mock gets (one relation on band "X")
  int threads = 0;        // mocks fitted in parallel (0: all cores)
  // With correlated mock anchors: give the fit their covariance (false: independent priors,
  // each with its own error, to show what ignoring the correlation costs).
  bool anchor_covariance = true;
  std::vector<std::string> parameters = {"alpha", "beta", "gamma", "parallax_offset_mas",
                                         "sigma_int"};

  std::string check() const;  // "" when usable, else "field: rule"
};

// Per parameter, over the mocks whose fit was usable.
struct StudyRow {
  std::string parameter;
  double truth = 0;
  double mean_estimate = 0;
  double mean_error = 0;               // mean covariance error
  double bias_in_errors = 0;           // (mean estimate - truth) / mean error
  double coverage = 0;                 // share with |estimate - truth| <= covariance error
  double bootstrap_coverage = 0;       // ... <= bootstrap error (NaN without a bootstrap)
  double bootstrap_to_covariance = 0;  // mean bootstrap error / mean covariance error
  // Mean standard deviation of the resamples / mean covariance error: above
  // bootstrap_to_covariance when a few resamples stray (fit_parts.hpp, bootstrap_spread).
  double bootstrap_sd_to_covariance = 0;
  double spread_to_error = 0;  // sd of the estimates / mean error
  double bias_error = 0;       // the bias's own uncertainty, in errors: sd / mean error / sqrt(n)
  int used = 0;                // mocks counted
};

// One mock's fit: what the summary is made of. Kept per mock so that runs on different
// seeds can be pooled exactly (combine_studies) rather than by averaging their summaries.
struct StudyMock {
  std::uint64_t seed = 0;
  bool ok = false;
  std::string failure;  // why the mock does not count, when it does not
  // Per parameter of the study, in its order; NaN where the fit has no such value.
  std::vector<double> estimate, error, bootstrap_error;
  // The resamples' standard deviation (NaN without a bootstrap, or in a run written before
  // 2026-12-04).
  std::vector<double> bootstrap_sd;
  // The mixture's fitted shape (kMixtureShapeNames that the fit has; none in a run written
  // before 2026-12-05): what the outlier and blend components took, which no truth gives.
  std::map<std::string, double> mixture;
};

// The mixture parameters each mock keeps beside the study's (StudyMock::mixture).
inline const std::vector<std::string> kMixtureShapeNames = {
    "outlier_fraction", "outlier_parallax_factor", "blend_fraction", "blend_scale_mag"};

struct StudyResult {
  std::vector<StudyRow> rows;
  int mocks = 0, failed = 0;
  std::map<std::string, std::vector<std::uint64_t>> failures;  // the failed mocks' seeds by reason
  std::vector<StudyMock> per_mock;                             // in seed order
  // What the mocks are: stars, truth, space, parameter_names (the order of StudyMock's
  // vectors), and whatever the caller adds (rungcal-study: its command-line settings, which
  // runs must share to be pooled).
  nlohmann::json header;
  // The header, the summary, and every mock's own figures ("per_mock").
  nlohmann::json to_json() const;
};

StudyResult run_study(const StudyOptions& options);
// The per-parameter summary of the given mocks against header["truth"] (by parameter name),
// for the parameters header["parameter_names"] names.
StudyResult summarise_study(nlohmann::json header, std::vector<StudyMock> mocks);
// A fixed-width table a person reads.
std::string study_table(const StudyResult& result);

}  // namespace rungcal
