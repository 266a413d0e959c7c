// SPDX-License-Identifier: MIT
#pragma once

namespace rungcal {

// Fault injection for crash tests: when the environment variable RUNGCAL_FAULT_AT equals
// `step`, the process kills itself with SIGKILL right here (no cleanup, as a power cut or
// an OOM kill would). A no-op otherwise. Steps are named in docs/operations.md.
void fault_point(const char* step);

}  // namespace rungcal
