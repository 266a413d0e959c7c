// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include <nlohmann/json.hpp>

namespace rungcal {

// What one change of scenario or fit does, mock by mock: two study runs on the same seeds
// differ only in that change (the mocks draw each effect from a stream of its own:
// MockScenario::seed), so the mean of the per-mock differences measures its effect with the
// spread of the differences, not of the mocks.
struct PairedRow {
  std::string parameter;
  int pairs = 0;           // mocks fitted in both runs, with a finite estimate and error
  double mean_shift = 0;   // mean over them of (estimate_A - estimate_B) / error_B
  double shift_error = 0;  // its standard error: shift_sd / sqrt(pairs)
  double shift_sd = 0;     // the differences' standard deviation
};

struct PairedStudy {
  std::string changed, reference;  // the runs A and B
  int common_seeds = 0;            // seeds in both runs (fitted or not)
  std::vector<PairedRow> rows;     // one per parameter, in B's order
  nlohmann::json to_json() const;
};

// Pairs run A (`changed`) with run B (`reference`), both --out files of rungcal-study, by seed.
// Throws InputError naming the file and key: "study_pairing_differs" (stars, truth,
// parameter names or the mocks' draw layout differ: the same seed is not the same mock),
// "study_no_common_seeds", and read_study_run's rules.
PairedStudy pair_studies(const std::string& changed, const std::string& reference);

// The pairing as a Markdown-ready text table.
std::string paired_table(const PairedStudy& p);

}  // namespace rungcal
