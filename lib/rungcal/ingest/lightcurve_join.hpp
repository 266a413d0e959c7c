// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>

#include "rungcal/ingest/ingest.hpp"

namespace rungcal {

// After a light-curve join: refuses (rule "no_photometry") the stars that have a magnitude
// in no band, neither from the catalog nor from their light curve, and drops them from the
// catalog. With [lightcurves] the row checks leave this rule to here: a star list with ids
// and periods only gets its magnitudes from the join. Returns the stars refused.
std::size_t refuse_stars_without_photometry(StarTable& catalog, IngestResult& result);

}  // namespace rungcal
