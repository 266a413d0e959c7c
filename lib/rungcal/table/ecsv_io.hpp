// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/table/source_table.hpp"

namespace rungcal {

// True when a file's first bytes are the ECSV signature "# %ECSV" (Enhanced Character
// Separated Values, the text table format of astropy: a YAML header in '#' lines giving
// each column's name, datatype and unit, then a line of column names and the data).
bool looks_like_ecsv(const std::string& path);

// Reads an ECSV table (version 0.9 or 1.0): the YAML header is parsed with libyaml; each
// column gets the header's type (string, bool, int8-64, uint8-64, float16-64) and unit, an
// empty field is a null, as is a float NaN. Delimiter ' ' (runs of spaces) or ','; double
// quotes as in CSV. Array columns (a `subtype`) are listed as unusable, unless named in
// `arrays`: those are read into SourceTable::arrays. An array cell is a JSON array of numbers
// or of true/false (ECSV 1.0, "variable-length arrays" and "multidimensional columns"), null
// and NaN elements are NaN, an empty field an empty array; an array that is not flat or
// holds another kind of value is "ecsv_value". Throws InputError
// naming the file, line and column: "unreadable_file", "ecsv_header" (no signature, YAML
// that does not parse, no datatype list, a column-name line that differs from the header's
// list), "field_count", "unterminated_quote", "ecsv_value" (a value that is not of its
// column's datatype: the header lies about the column).
SourceTable read_ecsv_table(const std::string& path, const std::vector<std::string>& arrays = {});
SourceTable parse_ecsv_table(const std::string& content, const std::string& name,
                             const std::vector<std::string>& arrays = {});

}  // namespace rungcal
