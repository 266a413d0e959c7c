// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/simulate/study.hpp"

namespace rungcal {

// Reads a study run written by StudyResult::to_json (rungcal-study --out). Throws InputError
// naming the file and the rule: "study_no_per_mock" (written before per-mock figures were
// kept), "study_format" (a key missing or of the wrong kind, or a mock's vectors not one value
// per parameter).
StudyResult read_study_run(const std::string& path);

// Pools runs of one setup on distinct seeds into one study, summarised over all their mocks
// exactly as one run of them all would be (the same rows to rounding). Throws InputError:
// "study_setup_differs" (a run's header differs from the first's: stars, truth, space,
// parameters or the recorded setup; the key is named), "study_seed_repeated" (a seed in two
// runs would count its mock twice).
StudyResult combine_studies(const std::vector<std::string>& paths);

}  // namespace rungcal
