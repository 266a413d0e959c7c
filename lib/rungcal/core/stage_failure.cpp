// SPDX-License-Identifier: MIT
#include "rungcal/core/stage_failure.hpp"

#include <mutex>
#include <utility>

namespace rungcal {
namespace {

std::mutex failure_mutex;
std::optional<StageFailure> last_failure;

}  // namespace

void remember_stage_failure(StageFailure failure) {
  std::lock_guard<std::mutex> lock(failure_mutex);
  last_failure = std::move(failure);
}

std::optional<StageFailure> take_stage_failure() {
  std::lock_guard<std::mutex> lock(failure_mutex);
  std::optional<StageFailure> out = std::move(last_failure);
  last_failure.reset();
  return out;
}

}  // namespace rungcal
