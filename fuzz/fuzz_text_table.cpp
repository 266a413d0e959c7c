// SPDX-License-Identifier: MIT
// Fuzz target: the delimited-text reader. The first byte picks the delimiter and header
// options, the rest is the file. A clean InputError is the expected answer to bad bytes;
// anything else (a crash, a sanitizer report, another exception) is a bug.
#include <cstddef>
#include <cstdint>
#include <string>

#include "rungcal/core/error.hpp"
#include "rungcal/table/text_io.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size == 0) return 0;
  rungcal::TextReadOptions o;
  const std::uint8_t pick = data[0];
  o.delimiter = rungcal::kDelimiterNames.entries[pick % 6].first;
  o.has_header = (pick & 0x08) == 0;
  if (!o.has_header) o.column_names = {"a", "b", "c", "d"};
  if (pick & 0x10) o.header_prefix = "#";
  if (pick & 0x20) o.skip_lines = 1;
  if (pick & 0x40) o.missing = {"---", "xxx", "NaN"};
  const std::string content(reinterpret_cast<const char*>(data + 1), size - 1);
  try {
    rungcal::SourceTable t = rungcal::parse_text_table(content, "fuzz.txt", o);
    // Touch every value the way the stages do.
    for (std::size_t c = 0; c < t.table.columns(); ++c)
      for (std::size_t r = 0; r < t.table.rows(); ++r) (void)t.table.column(c).to_string(r);
    (void)rungcal::format_csv_table(t.table);
  } catch (const rungcal::InputError&) {
  }
  return 0;
}
