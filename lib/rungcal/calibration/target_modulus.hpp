// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>

#include "rungcal/calibration/calibration.hpp"

namespace rungcal {

// A target Cepheid's distance modulus with its two errors kept apart.
struct TargetModulus {
  double mu = 0;                 // m0 - M(log P[, Fe/H])
  double stat_error = 0;         // photometry and intrinsic scatter: independent star to star
  double calibration_error = 0;  // sqrt(g^T C g) from the calibration: shared by every star
};

// mu = m0 - M(log P[, Fe/H]) with M from predict_absolute_magnitude; statistical error
// sqrt(m0_err^2 + sigma_int^2), calibration error sqrt(g^T C g), as rungcal-apply takes each
// star's (docs/file-formats.md, "Distances"). Throws InputError as predict_absolute_magnitude.
TargetModulus distance_modulus_from_calibration(const Calibration& calibration,
                                                const std::string& relation, double log_period,
                                                double m0, double m0_err,
                                                std::optional<double> feh = std::nullopt);

}  // namespace rungcal
