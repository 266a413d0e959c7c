// SPDX-License-Identifier: MIT
#pragma once

namespace rungcal {

// Project version (CMake PROJECT_VERSION) and the git commit the build came from, with a
// "-dirty" suffix when tracked files differed from that commit. Stamped into every product.
const char* software_version();
const char* software_commit();

}  // namespace rungcal
