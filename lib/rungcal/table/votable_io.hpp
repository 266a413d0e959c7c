// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/table/source_table.hpp"

namespace rungcal {

// True for .vot, .xml and .votable file names (any case): the VOTable reader is chosen by
// extension (or by [source] format = "votable").
bool has_votable_extension(const std::string& path);

// Reads the first TABLE of a VOTable (IVOA VOTable 1.x, the XML format of the Gaia archive
// and of astroquery) with libexpat, in TABLEDATA, BINARY or BINARY2 serialization (the
// binary ones in a base64 STREAM inside the file: VOTable 1.4, section 5). Each FIELD's
// datatype gives the column type (char and unicodeChar: text; boolean and bit: logical; the
// integer types: integer; float and double: real) and its unit attribute the unit. An empty
// TD or string, a float NaN and a value equal to the FIELD's <VALUES null="..."/> are nulls,
// and in BINARY2 a set bit of the row's null mask. Array FIELDs (arraysize on a
// non-character type) are listed as unusable, unless named in `arrays`: those are read into
// SourceTable::arrays, a TD's elements separated by whitespace (VOTable 1.4, section 6.1),
// an element equal to the null value or "NaN" a NaN. Rows are named by the line of their TR
// (TABLEDATA) or their number in the stream (binary). Throws InputError naming the file,
// line or row and column: "unreadable_file", "votable_xml" (malformed XML), "votable_table"
// (no TABLE, no FIELD, a FITS serialization or an external or non-base64 STREAM, a FIELD
// whose size in a binary stream is unknown), "field_count" (a TR with more or fewer TDs than
// FIELDs), "votable_value" (a value that is not of its FIELD's type), "votable_base64" (a
// STREAM that is not base64), "votable_binary" (a binary stream that ends inside a row, or
// an array count beyond the stream or the arraysize).
SourceTable read_votable_table(const std::string& path,
                               const std::vector<std::string>& arrays = {});
SourceTable parse_votable_table(const std::string& content, const std::string& name,
                                const std::vector<std::string>& arrays = {});

}  // namespace rungcal
