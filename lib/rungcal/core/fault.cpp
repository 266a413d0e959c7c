// SPDX-License-Identifier: MIT
#include "rungcal/core/fault.hpp"

#include <csignal>
#include <cstdlib>
#include <cstring>
#include <string>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"

namespace rungcal {

void fault_point(const char* step) {
  const char* at = std::getenv("RUNGCAL_FAULT_AT");
  if (at && std::strcmp(at, step) == 0) std::raise(SIGKILL);
}

void fault_throw_point(const char* step, std::size_t item) {
  static const char* const at = std::getenv("RUNGCAL_FAULT_THROW");
  if (!at || fmt::format("{}:{}", step, item) != at) return;
  throw InputError({"(fault injection)", {}, {}}, "injected_fault",
                   fmt::format("RUNGCAL_FAULT_THROW={} reached", at));
}

}  // namespace rungcal
