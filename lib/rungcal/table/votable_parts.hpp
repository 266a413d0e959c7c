// SPDX-License-Identifier: MIT
// Shared inside the table module by the VOTable reader's two parts: votable_io.cpp reads the
// XML (the FIELDs and TABLEDATA), votable_binary.cpp the BINARY and BINARY2 streams. Not
// installed.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "rungcal/table/source_table.hpp"

namespace rungcal {

// A FIELD as the reader keeps it.
struct VotableField {
  std::string name, datatype, unit, arraysize;
  std::optional<std::string> null_value;  // <VALUES null="...">
  ColumnType type = ColumnType::kText;
  bool usable = true;            // read into a column of SourceTable::table
  ArrayColumn* array = nullptr;  // an array FIELD asked for by name
};

// The two binary serializations (VOTable 1.4, sections 5.4 and 5.5).
enum class VotableStream { kBinary, kBinary2 };

// Appends the rows of one decoded STREAM to out: each FIELD's value to its column (columns[c],
// nullptr when the FIELD is not read) or to its ArrayColumn, the stream's row number (from 1)
// to out.source_rows. Format: VOTable 1.4, section 5: the values big-endian in FIELD order;
// a variable-length array (arraysize "*", "n*", "AxB*") preceded by its number of elements as
// a 4-byte unsigned integer; BINARY2 rows preceded by a null mask of ceil(FIELDs / 8) bytes,
// the first FIELD in the first byte's most significant bit. Nulls: a set mask bit, and in
// both the VALUES null of an integer, a float NaN, a boolean '?', space or NUL, an empty
// string. Throws InputError naming file, row and column: "votable_table" (a FIELD whose size
// in the stream cannot be known: an unknown datatype or a bad arraysize), "votable_binary"
// (the stream ends inside a row, or an array's count goes beyond the stream or beyond the
// arraysize), "votable_value" (a boolean byte or a unicodeChar that is not one).
void read_votable_binary_rows(std::string_view bytes, VotableStream kind,
                              const std::vector<VotableField>& fields,
                              const std::vector<Column*>& columns, const std::string& file,
                              SourceTable& out);

}  // namespace rungcal
