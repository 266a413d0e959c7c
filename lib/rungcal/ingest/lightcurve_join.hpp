// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>

#include "rungcal/ingest/ingest.hpp"

namespace rungcal {

// After a light-curve join: refuses the stars still without a period (rule "no_period": the
// star list has no period column and the star's light curve gave no usable one) or without
// a magnitude in any band, neither from the catalog nor from their light curve (rule
// "no_photometry"), and checks each period the join gave against [validate]'s class period
// ranges as the row checks do a catalog's own (rules "period_out_of_range" and
// "period_outside_class_range", the latter refused or warned about by class_period_check).
// Drops the refused stars from the catalog. With [lightcurves] the row checks leave these
// rules to here: a star list of ids alone gets its periods and magnitudes from the join.
// Returns the stars refused.
std::size_t refuse_incomplete_stars_after_join(StarTable& catalog, const IngestOptions& options,
                                               IngestResult& result);

}  // namespace rungcal
