// SPDX-License-Identifier: MIT
// Loads STORE NAME@latest and prints M(log P) for RELATION: consumer STORE REF RELATION LOGP
#include <cstdio>
#include <cstdlib>

#include "rungcal/calibration/store.hpp"

int main(int argc, char** argv) {
  if (argc != 5) return 2;
  rungcal::Calibration cal = rungcal::load_calibration(argv[1], argv[2]);
  rungcal::Prediction p = rungcal::predict_absolute_magnitude(cal, argv[3], std::atof(argv[4]));
  std::printf("%s %.6f %.6f\n", cal.label().c_str(), p.abs_mag, p.calibration_error);
  return 0;
}
