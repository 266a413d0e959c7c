// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

namespace rungcal::python {

// A stage's main (pipeline/rungcal-<stage>.cpp), compiled into the module under another
// name (python/CMakeLists.txt generates the table).
using StageMain = int (*)(int argc, char** argv);
struct StageEntry {
  const char* stage;  // "fit" for rungcal-fit
  StageMain main;
};
const std::vector<StageEntry>& stage_table();

}  // namespace rungcal::python
