// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>

namespace rungcal {

// Fault injection for crash tests: when the environment variable RUNGCAL_FAULT_AT equals
// `step`, the process kills itself with SIGKILL right here (no cleanup, as a power cut or
// an OOM kill would). A no-op otherwise. Steps are named in docs/operations.md.
void fault_point(const char* step);

// Fault injection for error-path tests: when RUNGCAL_FAULT_THROW equals "step:item" (e.g.
// "distributed_item:7"), throws InputError with rule "injected_fault" here, as bad input
// met while working on that item would. A no-op otherwise.
void fault_throw_point(const char* step, std::size_t item);

}  // namespace rungcal
