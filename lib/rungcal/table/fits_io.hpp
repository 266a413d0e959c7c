// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <utility>
#include <vector>

#include "rungcal/table/source_table.hpp"

namespace rungcal {

// Which binary-table HDU to read: by EXTNAME, or by index (1 = first extension), or the
// first binary table when neither is given.
struct FitsHduChoice {
  std::string name;  // EXTNAME; wins over index when both are set
  int index = 0;     // 1-based extension number, 0 = first binary table
};

// Reads one binary-table HDU. Real columns: NaN is null. Integer columns: TNULLn is null.
// Logical columns: the FITS null byte is null. Text columns: an all-blank value is null.
// Units come from TUNITn, header keywords (other than the table structure) into header().
// Vector columns are listed in unusable_columns, unless named in `arrays`: those, fixed
// (rE, rD, rJ, rL, ...) or variable-length (1PD(n), 1QE(n), ...), are read into
// SourceTable::arrays (a variable-length column's length is its row's descriptor, FITS 4.0
// section 7.3.5). Throws InputError: "unreadable_file", "fits_read" (truncated or corrupt
// file, cfitsio's message included), "fits_hdu" (no such HDU, or not a binary table),
// "empty_file".
SourceTable read_fits_table(const std::string& path, const FitsHduChoice& hdu = {},
                            const std::vector<std::string>& arrays = {});

// A binary-table HDU opened once and read in row ranges, so a large catalog can be taken
// in groups of rows without holding it whole. Same rules and errors as read_fits_table.
class FitsTableReader {
 public:
  FitsTableReader(const std::string& path, const FitsHduChoice& hdu = {});
  ~FitsTableReader();
  FitsTableReader(const FitsTableReader&) = delete;
  FitsTableReader& operator=(const FitsTableReader&) = delete;

  std::int64_t rows() const;
  // Rows first .. first + count - 1 (0-based; count < 0: to the end); source_rows stay the
  // file's 1-based row numbers.
  SourceTable read(std::int64_t first, std::int64_t count);
  // Plain columns (big-endian numbers, logicals, text; no TSCAL/TZERO) are decoded from one
  // read of the rows' raw bytes; off: every column through cfitsio's column reads, which
  // give the same values (the tests compare the two).
  void use_block_reads(bool on);
  // Array columns to read into SourceTable::arrays (see read_fits_table).
  void read_arrays(std::vector<std::string> names);

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

// A table and the EXTNAME it is written under.
using NamedTable = std::pair<std::string, const StarTable*>;

// Writes one binary table group by group, for tables larger than memory should hold,
// then any further whole tables; atomic like write_fits_tables (nothing appears at the
// path until finish()). Every group has the first group's columns; a text column widens
// when a later group holds a longer value.
class FitsTableStream {
 public:
  // expected_rows: rows the table is made with, when known (fewer written are dropped at
  // finish(); more are added as they come, at the cost of writing them twice).
  FitsTableStream(const std::string& path, std::string extname, std::int64_t expected_rows = 0);
  ~FitsTableStream();  // without finish(): the temporary file is removed
  FitsTableStream(const FitsTableStream&) = delete;
  FitsTableStream& operator=(const FitsTableStream&) = delete;

  void append(const StarTable& rows);
  std::int64_t rows() const;
  // Writes the streamed table's header keywords (at most kStreamHeaderRoom), then `more`
  // as further HDUs; closes and renames into place. empty_schema gives the columns when no
  // group was appended.
  void finish(const std::vector<Keyword>& header, const std::vector<NamedTable>& more,
              const StarTable& empty_schema);
  static constexpr int kStreamHeaderRoom = 200;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

// Writes tables as binary-table extensions after an empty primary HDU, each with its units
// (TUNITn), column descriptions (TTYPEn comments), header keywords, and for integer columns
// TNULLn. Keyword names longer than 8 characters are written with the HIERARCH convention,
// long string values with the LONGSTRN convention. Atomic: temp file, fsync, rename.
void write_fits_tables(const std::string& path, const std::vector<NamedTable>& tables);

}  // namespace rungcal
