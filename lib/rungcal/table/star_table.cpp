// SPDX-License-Identifier: MIT
#include "rungcal/table/star_table.hpp"

#include <cmath>
#include <limits>
#include <stdexcept>

#include <fmt/format.h>

namespace rungcal {

const char* column_type_name(ColumnType type) {
  switch (type) {
    case ColumnType::kReal:
      return "real";
    case ColumnType::kInteger:
      return "integer";
    case ColumnType::kText:
      return "text";
    case ColumnType::kBoolean:
      return "boolean";
  }
  return "?";
}

void Column::resize(std::size_t rows) {
  switch (type) {
    case ColumnType::kReal:
      real.resize(rows, std::numeric_limits<double>::quiet_NaN());
      break;
    case ColumnType::kInteger:
      integer.resize(rows, 0);
      break;
    case ColumnType::kText:
      text.resize(rows);
      break;
    case ColumnType::kBoolean:
      boolean.resize(rows, 0);
      break;
  }
  null.resize(rows, 1);
}

void Column::push_null() { resize(size() + 1); }

void Column::push_real(double v) {
  real.push_back(v);
  null.push_back(std::isnan(v) ? 1 : 0);
}
void Column::push_integer(std::int64_t v) {
  integer.push_back(v);
  null.push_back(0);
}
void Column::push_text(std::string v) {
  text.push_back(std::move(v));
  null.push_back(0);
}
void Column::push_boolean(bool v) {
  boolean.push_back(v ? 1 : 0);
  null.push_back(0);
}

double Column::as_real(std::size_t row) const {
  if (is_null(row)) return std::numeric_limits<double>::quiet_NaN();
  switch (type) {
    case ColumnType::kReal:
      return real[row];
    case ColumnType::kInteger:
      return static_cast<double>(integer[row]);
    case ColumnType::kBoolean:
      return boolean[row] ? 1.0 : 0.0;
    case ColumnType::kText:
      return std::numeric_limits<double>::quiet_NaN();
  }
  return std::numeric_limits<double>::quiet_NaN();
}

std::string Column::to_string(std::size_t row) const {
  if (is_null(row)) return "";
  switch (type) {
    case ColumnType::kReal:
      return fmt::format("{}", real[row]);
    case ColumnType::kInteger:
      return fmt::format("{}", integer[row]);
    case ColumnType::kBoolean:
      return boolean[row] ? "true" : "false";
    case ColumnType::kText:
      return text[row];
  }
  return "";
}

const Column& StarTable::column(const std::string& name) const {
  auto it = index_.find(name);
  if (it == index_.end()) throw std::out_of_range("StarTable has no column '" + name + "'");
  return columns_[it->second];
}

Column& StarTable::column(const std::string& name) {
  return const_cast<Column&>(static_cast<const StarTable&>(*this).column(name));
}

std::vector<std::string> StarTable::column_names() const {
  std::vector<std::string> out;
  for (const auto& c : columns_) out.push_back(c.name);
  return out;
}

Column& StarTable::add_column(const std::string& name, ColumnType type, const std::string& unit,
                              const std::string& description) {
  Column c;
  c.name = name;
  c.type = type;
  c.unit = unit;
  c.description = description;
  c.resize(rows());
  auto it = index_.find(name);
  if (it != index_.end()) {
    columns_[it->second] = std::move(c);
    return columns_[it->second];
  }
  index_[name] = columns_.size();
  columns_.push_back(std::move(c));
  return columns_.back();
}

void StarTable::remove_column(const std::string& name) {
  auto it = index_.find(name);
  if (it == index_.end()) return;
  columns_.erase(columns_.begin() + static_cast<std::ptrdiff_t>(it->second));
  index_.clear();
  for (std::size_t i = 0; i < columns_.size(); ++i) index_[columns_[i].name] = i;
}

StarTable StarTable::select_rows(const std::vector<std::size_t>& rows) const {
  StarTable out;
  out.header_ = header_;
  for (const auto& c : columns_) {
    Column n;
    n.name = c.name;
    n.type = c.type;
    n.unit = c.unit;
    n.description = c.description;
    for (std::size_t r : rows) {
      n.null.push_back(c.null[r]);
      switch (c.type) {
        case ColumnType::kReal:
          n.real.push_back(c.real[r]);
          break;
        case ColumnType::kInteger:
          n.integer.push_back(c.integer[r]);
          break;
        case ColumnType::kText:
          n.text.push_back(c.text[r]);
          break;
        case ColumnType::kBoolean:
          n.boolean.push_back(c.boolean[r]);
          break;
      }
    }
    out.index_[n.name] = out.columns_.size();
    out.columns_.push_back(std::move(n));
  }
  return out;
}

void StarTable::set_keyword(const std::string& key,
                            std::variant<std::string, double, std::int64_t, bool> value,
                            const std::string& comment) {
  for (auto& k : header_) {
    if (k.key == key) {
      k.value = std::move(value);
      k.comment = comment;
      return;
    }
  }
  header_.push_back({key, std::move(value), comment});
}

const Keyword* StarTable::keyword(const std::string& key) const {
  for (const auto& k : header_)
    if (k.key == key) return &k;
  return nullptr;
}

void StarTable::append_rows(const StarTable& other) {
  if (other.columns() != columns())
    throw std::logic_error("append_rows: the tables have different columns");
  for (std::size_t c = 0; c < columns(); ++c) {
    Column& to = columns_[c];
    const Column& from = other.columns_[c];
    if (to.name != from.name || to.type != from.type)
      throw std::logic_error("append_rows: column " + to.name + " differs");
    to.null.insert(to.null.end(), from.null.begin(), from.null.end());
    switch (to.type) {
      case ColumnType::kReal:
        to.real.insert(to.real.end(), from.real.begin(), from.real.end());
        break;
      case ColumnType::kInteger:
        to.integer.insert(to.integer.end(), from.integer.begin(), from.integer.end());
        break;
      case ColumnType::kText:
        to.text.insert(to.text.end(), from.text.begin(), from.text.end());
        break;
      case ColumnType::kBoolean:
        to.boolean.insert(to.boolean.end(), from.boolean.begin(), from.boolean.end());
        break;
    }
  }
}

void StarTable::reserve_rows(std::size_t rows) {
  for (Column& c : columns_) {
    c.null.reserve(rows);
    switch (c.type) {
      case ColumnType::kReal:
        c.real.reserve(rows);
        break;
      case ColumnType::kInteger:
        c.integer.reserve(rows);
        break;
      case ColumnType::kText:
        c.text.reserve(rows);
        break;
      case ColumnType::kBoolean:
        c.boolean.reserve(rows);
        break;
    }
  }
}

}  // namespace rungcal
