// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "rungcal/core/enum_table.hpp"
#include "rungcal/table/source_table.hpp"

namespace rungcal {

// How fields are separated in a delimited text table.
enum class Delimiter {
  kComma,       // "," with RFC 4180 double quotes
  kTab,         // one tab
  kSemicolon,   // ";"
  kPipe,        // "|"
  kWhitespace,  // any run of spaces or tabs
  kMultiSpace,  // two or more spaces, or a tab: names with single spaces stay whole
};
inline constexpr EnumTable<Delimiter, 6> kDelimiterNames{{{
    {Delimiter::kComma, "comma"},
    {Delimiter::kTab, "tab"},
    {Delimiter::kSemicolon, "semicolon"},
    {Delimiter::kPipe, "pipe"},
    {Delimiter::kWhitespace, "whitespace"},
    {Delimiter::kMultiSpace, "multispace"},
}}};

struct TextReadOptions {
  Delimiter delimiter = Delimiter::kComma;  // field separator
  bool has_header = true;                   // a line names the columns
  std::string header_prefix;  // the header line starts with this (e.g. "#"), which is cut off
  std::string comment_prefix = "#";  // other lines starting with this are skipped
  std::size_t skip_lines = 0;        // lines skipped before anything else
  // Field values that mean "no value" (compared after trimming); an empty field always does.
  std::vector<std::string> missing = {"NaN", "nan"};
  std::vector<std::string> column_names;  // names for a headerless file, in order
  // A field longer than this (bytes) stops the file with rule "field_too_long": one runaway
  // field (a lost quote, a pasted blob) would otherwise widen a text column of the catalog
  // for every row. 64 KiB is far above any id, name or number (common practice).
  std::size_t max_field_bytes = 65536;

  // "" when usable, else the broken rule ("column_names: required when has_header is false").
  std::string check() const;
};

// Reads a delimited text table: every column comes back as text (typing happens when the
// columns are mapped). A UTF-8 byte-order mark is dropped, CRLF and a missing final newline
// are accepted. Throws InputError: "unreadable_file", "empty_file", "encoding" (UTF-16/32 or
// NUL bytes), "field_count", "duplicate_column", "unterminated_quote", "field_too_long".
SourceTable read_text_table(const std::string& path, const TextReadOptions& options);
SourceTable parse_text_table(const std::string& content, const std::string& name,
                             const TextReadOptions& options);

// Reads a delimited text table group by group in file order, holding one group's rows in
// memory: the rules and errors of read_text_table, an error in a later line surfacing when
// its group is read. The constructor reads up to the header ("empty_file" when none).
class TextTableReader {
 public:
  TextTableReader(const std::string& path, const TextReadOptions& options);
  ~TextTableReader();
  TextTableReader(const TextTableReader&) = delete;
  TextTableReader& operator=(const TextTableReader&) = delete;
  // The next data rows, at most max_rows; a table with the columns and no rows at the end.
  SourceTable read(std::size_t max_rows);
  // Bytes of the file taken so far, and in all (0 when not seekable): for progress.
  std::uint64_t bytes_read() const;
  std::uint64_t file_bytes() const { return file_bytes_; }

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
  std::uint64_t file_bytes_ = 0;
};

// A whole field as a number, as the C library reads it (decimal or exponent form, inf,
// nan), also with a leading '+', which published tables use; false for anything else,
// trailing characters and values beyond double's range included.
bool parse_real(std::string_view text, double& out);

// A cell as a number: a numeric column's value, a text column's field through parse_real;
// nullopt for a null or a field that is not a number.
std::optional<double> cell_number(const Column& column, std::size_t row);

// Writes a table as CSV (comma, RFC 4180 quoting, header line, empty field for null), with
// the header keywords as leading "# key = value" lines. Atomic (temp file + rename).
void write_csv_table(const StarTable& table, const std::string& path);
std::string format_csv_table(const StarTable& table);

}  // namespace rungcal
