// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <functional>
#include <string>
#include <utility>
#include <vector>

#include "rungcal/table/star_table.hpp"

namespace rungcal {

// One column of a product built from a list of result rows: its declaration and how a row
// fills it, in one place, so a column cannot be declared without being filled.
template <typename Row>
struct RowColumn {
  std::string name;
  ColumnType type = ColumnType::kReal;
  std::string unit;         // FITS TUNIT ("" when dimensionless)
  std::string description;  // one line
  std::function<void(Column&, const Row&)> fill;
};

// A real column: get(row) -> double (NaN is written as null).
template <typename Row, typename Get>
RowColumn<Row> real_column(std::string name, std::string unit, std::string description, Get get) {
  return {std::move(name), ColumnType::kReal, std::move(unit), std::move(description),
          [get](Column& c, const Row& r) { c.push_real(get(r)); }};
}
// An integer column: get(row) -> an integer.
template <typename Row, typename Get>
RowColumn<Row> integer_column(std::string name, std::string description, Get get) {
  return {std::move(name), ColumnType::kInteger, "", std::move(description),
          [get](Column& c, const Row& r) { c.push_integer(static_cast<std::int64_t>(get(r))); }};
}
// A text column: get(row) -> a string.
template <typename Row, typename Get>
RowColumn<Row> text_column(std::string name, std::string description, Get get) {
  return {std::move(name), ColumnType::kText, "", std::move(description),
          [get](Column& c, const Row& r) { c.push_text(get(r)); }};
}
// A boolean column: get(row) -> bool.
template <typename Row, typename Get>
RowColumn<Row> boolean_column(std::string name, std::string description, Get get) {
  return {std::move(name), ColumnType::kBoolean, "", std::move(description),
          [get](Column& c, const Row& r) { c.push_boolean(get(r)); }};
}

// The table of these columns, one table row per element of rows.
template <typename Row>
StarTable table_from_rows(const std::vector<RowColumn<Row>>& columns,
                          const std::vector<Row>& rows) {
  StarTable t;
  std::vector<Column*> out;
  for (const auto& c : columns) out.push_back(&t.add_column(c.name, c.type, c.unit, c.description));
  t.reserve_rows(rows.size());
  for (const Row& r : rows)
    for (std::size_t j = 0; j < columns.size(); ++j) columns[j].fill(*out[j], r);
  return t;
}

}  // namespace rungcal
