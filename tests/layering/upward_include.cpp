// SPDX-License-Identifier: MIT
// Built by the test Build.AnUpwardIncludeDoesNotCompile as part of the report module: report
// sits on a floor below run, so run's header must not be found (DEVELOPERS.md, "Layout").
#include "rungcal/run/run.hpp"
