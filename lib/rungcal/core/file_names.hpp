// SPDX-License-Identifier: MIT
#pragma once

#include <string>

namespace rungcal {

// A file-name part made from data (a star id, a relation name), safe to join to a folder:
// letters, digits and '.', '_', '+', '-' are kept, anything else (a '/', "..", a space, a
// control byte) becomes '_', and a leading '.' too, so the name can neither leave the folder
// nor hide in it. When anything was replaced, the first 8 hex digits of the original's
// SHA-256 are appended, so that two ids differing only in replaced characters ("a/b",
// "a b") still name two files. Long parts are cut to 120 bytes before the suffix.
std::string file_name_part(const std::string& text);

// A product's companion file beside it: the path's stem with suffix in place of its
// extension ("out/fit.json", "_residuals.fits" -> "out/fit_residuals.fits"). The one naming
// rule of every stage's default second product, which rungcal-run lists too.
std::string path_beside(const std::string& path, const std::string& suffix);

}  // namespace rungcal
