// SPDX-License-Identifier: MIT
#include "rungcal/calibration/target_modulus.hpp"

#include <cmath>

namespace rungcal {

TargetModulus distance_modulus_from_calibration(const Calibration& calibration,
                                                const std::string& relation, double log_period,
                                                double m0, double m0_err,
                                                std::optional<double> feh) {
  const Prediction p = predict_absolute_magnitude(calibration, relation, log_period, feh);
  return {m0 - p.abs_mag, std::hypot(m0_err, p.intrinsic_scatter), p.calibration_error};
}

}  // namespace rungcal
