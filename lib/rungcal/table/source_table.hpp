// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <map>
#include <string>
#include <vector>

#include "rungcal/table/star_table.hpp"

namespace rungcal {

// An array column (a FITS vector or variable-length column, a VOTable FIELD with an
// arraysize, an ECSV column with a subtype), read only when a reader is asked for it by name:
// one vector per row, numbers as double, logicals as 1 and 0, a null element as NaN; a null
// cell is an empty vector.
struct ArrayColumn {
  std::string unit;
  bool logical = false;
  std::vector<std::vector<double>> rows;
};

// A table as read from an input file, before mapping to canonical columns: the values, the
// file it came from, and for each row the place a person finds it in that file (the line of
// a text file, the row of a FITS table), so that every error can name it.
struct SourceTable {
  std::string file;
  StarTable table;
  std::vector<std::int64_t> source_rows;
  std::string row_label = "row";  // "line" for text files
  // Columns present in the file that rungcal cannot read, with the reason (e.g. FITS vector
  // columns), so that a config naming one gets that reason rather than "no such column".
  std::map<std::string, std::string> unusable_columns;
  // The array columns asked for that the file has, by name (not also in unusable_columns).
  std::map<std::string, ArrayColumn> arrays;
};

}  // namespace rungcal
