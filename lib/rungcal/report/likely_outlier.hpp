// SPDX-License-Identifier: MIT
#pragma once

#include <cmath>
#include <cstddef>

#include "rungcal/table/fit_residuals_schema.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// Below this membership probability (the hierarchical fit's residuals) a used star is
// reported as a likely outlier or blend: by the PL figure, the star table and the status page.
inline constexpr double kLikelyOutlierMembership = 0.5;

// True when row `row` of a fit's residuals is a used star whose membership is below
// kLikelyOutlierMembership (false without the column, as after a residual-space fit).
inline bool likely_outlier(const StarTable& residuals, std::size_t row) {
  if (!residuals.has(residual_col::kMembership) ||
      !residuals.column(residual_col::kUsed).boolean[row])
    return false;
  const Column& m = residuals.column(residual_col::kMembership);
  return !m.is_null(row) && std::isfinite(m.real[row]) && m.real[row] < kLikelyOutlierMembership;
}

}  // namespace rungcal
