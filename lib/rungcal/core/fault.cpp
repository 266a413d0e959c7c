// SPDX-License-Identifier: MIT
#include "rungcal/core/fault.hpp"

#include <csignal>
#include <cstdlib>
#include <cstring>

namespace rungcal {

void fault_point(const char* step) {
  const char* at = std::getenv("RUNGCAL_FAULT_AT");
  if (at && std::strcmp(at, step) == 0) std::raise(SIGKILL);
}

}  // namespace rungcal
