// SPDX-License-Identifier: MIT
#pragma once

#include "rungcal/table/star_table.hpp"

namespace rungcal::python {

// A CSV product's column (read as text) typed by its values: boolean when every value is
// "true" or "false" (as the CSV writer prints them), integer when every value is a whole
// number written without a point or exponent, real when every value is a number (or the
// column is empty), else text as read. Nulls stay null.
Column typed_from_text(const Column& text);

}  // namespace rungcal::python
