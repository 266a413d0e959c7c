// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <deque>
#include <map>
#include <optional>
#include <string>
#include <variant>
#include <vector>

namespace rungcal {

enum class ColumnType { kReal, kInteger, kText, kBoolean };
const char* column_type_name(ColumnType type);

// One column: values of one type, a null flag per row, a unit (FITS TUNIT string, "" when
// dimensionless) and a one-line description. Real nulls are also stored as NaN so numeric
// code that forgets to look at the flags still cannot use a made-up value.
struct Column {
  std::string name;
  ColumnType type = ColumnType::kReal;
  std::string unit;
  std::string description;
  std::vector<double> real;
  std::vector<std::int64_t> integer;
  std::vector<std::string> text;
  std::vector<std::uint8_t> boolean;
  std::vector<std::uint8_t> null;  // 1 where the value is missing

  std::size_t size() const { return null.size(); }
  bool is_null(std::size_t row) const { return null[row] != 0; }
  void resize(std::size_t rows);
  // Appends a null of this column's type.
  void push_null();
  void push_real(double v);  // NaN is stored as a null
  void push_integer(std::int64_t v);
  void push_text(std::string v);
  void push_boolean(bool v);
  // The value as a double (integers and booleans converted); NaN when null or text.
  double as_real(std::size_t row) const;
  // Printable value for messages and CSV ("" when null).
  std::string to_string(std::size_t row) const;
};

// A header keyword of a product (FITS card or JSON field under the same name).
struct Keyword {
  std::string key;
  std::variant<std::string, double, std::int64_t, bool> value;
  std::string comment;
};

// A typed, columnar table of stars: what every stage reads and writes.
class StarTable {
 public:
  std::size_t rows() const { return columns_.empty() ? 0 : columns_.front().size(); }
  std::size_t columns() const { return columns_.size(); }
  bool has(const std::string& name) const { return index_.count(name) != 0; }
  // Throws std::out_of_range naming the column when it is absent (a programming error:
  // stages check user-named columns with has() first).
  const Column& column(const std::string& name) const;
  Column& column(const std::string& name);
  const Column& column(std::size_t i) const { return columns_[i]; }
  Column& column(std::size_t i) { return columns_[i]; }
  std::vector<std::string> column_names() const;

  // Adds an empty column sized to the current row count (all null); replaces a column of
  // the same name in place. References to other columns stay valid.
  Column& add_column(const std::string& name, ColumnType type, const std::string& unit = "",
                     const std::string& description = "");
  void remove_column(const std::string& name);
  // A new table with only the given rows, in that order.
  StarTable select_rows(const std::vector<std::size_t>& rows) const;
  // Appends other's rows; other has the same columns in the same order (else
  // std::logic_error, a programming error).
  void append_rows(const StarTable& other);
  // Room for this many rows in every column (appending them then never reallocates).
  void reserve_rows(std::size_t rows);

  std::vector<Keyword>& header() { return header_; }
  const std::vector<Keyword>& header() const { return header_; }
  void set_keyword(const std::string& key,
                   std::variant<std::string, double, std::int64_t, bool> value,
                   const std::string& comment = "");
  const Keyword* keyword(const std::string& key) const;

 private:
  std::deque<Column> columns_;  // a deque: adding a column never moves the others
  std::map<std::string, std::size_t> index_;
  std::vector<Keyword> header_;
};

}  // namespace rungcal
