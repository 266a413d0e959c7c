// SPDX-License-Identifier: MIT
#pragma once

// The FITS reader's and writer's parts, shared by their files (fits_read.cpp reads tables,
// fits_raw.cpp decodes plain columns from raw rows, fits_write.cpp writes tables). Not an
// interface of its own: include fits_io.hpp from outside the table module.

#include <fitsio.h>

#include <cstddef>
#include <optional>
#include <string>
#include <vector>

#include "rungcal/table/star_table.hpp"

namespace rungcal::fits_parts {

// cfitsio's text for a status, with the messages on its error stack.
std::string cfitsio_message(int status);

// Closes a cfitsio file on the way out of a scope, an error's included; a close whose status
// matters is done by hand.
struct FitsFileCloser {
  void operator()(fitsfile* f) const {
    int status = 0;
    if (f) fits_close_file(f, &status);
  }
};

// cfitsio's path for a file name taken literally. fits_open_file and fits_create_file parse
// cfitsio's extended filename syntax ("cal[1].fits" would mean HDU 1 of cal, "run(2)/x" a
// template, and a "file://" prefix does not turn that off); fits_open_diskfile does not.
// Its disk driver still expands a leading '~', so such a relative name gets "./".
std::string literal_name(const std::string& path);

// How a column is decoded from a block of raw rows (FITS Standard 4.0, section 7.3): plain
// big-endian numbers, logicals and characters, without TSCAL/TZERO. Other columns (scaled,
// vector, bit, complex, variable-length) are read by cfitsio column by column.
struct RawColumn {
  char type = 0;           // TFORM letter: D E K J I B L A
  std::size_t offset = 0;  // byte offset in the row
  std::size_t bytes = 0;   // field width
  bool has_tnull = false;  // integer columns: the TNULLn value marks a null
  LONGLONG tnull = 0;
};

// Plans the block decode of every column; a column it cannot decode keeps cfitsio's reader.
// False when the row layout is not fully known (then every column goes through cfitsio).
bool plan_raw_columns(fitsfile* f, int columns, std::size_t& row_bytes,
                      std::vector<std::optional<RawColumn>>& raw);

// One column of n rows decoded from a block of raw rows, as cfitsio's column reads give it:
// text up to its first NUL without trailing blanks (empty: null), NaN and TNULL as null,
// logical 'T'/'F' (0: null).
void decode_raw_column(const RawColumn& rc, const std::string& name, const std::string& unit,
                       const unsigned char* block, std::size_t row_bytes, std::size_t n,
                       StarTable& table);

}  // namespace rungcal::fits_parts
