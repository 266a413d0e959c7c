// SPDX-License-Identifier: MIT
#include "column_types.hpp"

#include <algorithm>
#include <cctype>
#include <string>

#include "rungcal/table/text_io.hpp"

namespace rungcal::python {
namespace {

// An optional sign, then at most 18 digits: a whole number int64 holds.
bool integer_text(const std::string& s) {
  const std::size_t start = !s.empty() && (s[0] == '-' || s[0] == '+') ? 1 : 0;
  const std::size_t digits = s.size() - start;
  return digits > 0 && digits <= 18 &&
         std::all_of(s.begin() + static_cast<std::ptrdiff_t>(start), s.end(),
                     [](char c) { return std::isdigit(static_cast<unsigned char>(c)) != 0; });
}

}  // namespace

Column typed_from_text(const Column& text) {
  bool all_boolean = true, all_integer = true, all_real = true;
  for (std::size_t r = 0; r < text.size(); ++r) {
    if (text.is_null(r)) continue;
    const std::string& s = text.text[r];
    double x = 0;
    all_boolean = all_boolean && (s == "true" || s == "false");
    all_real = all_real && parse_real(s, x);
    all_integer = all_integer && integer_text(s);
  }
  bool any = false;
  for (std::size_t r = 0; r < text.size() && !any; ++r) any = !text.is_null(r);
  if (!any) all_boolean = all_integer = false;
  if (!all_boolean && !all_integer && !all_real) return text;
  Column out;
  out.name = text.name;
  out.unit = text.unit;
  out.description = text.description;
  out.type = all_boolean   ? ColumnType::kBoolean
             : all_integer ? ColumnType::kInteger
                           : ColumnType::kReal;
  for (std::size_t r = 0; r < text.size(); ++r) {
    double x = 0;
    if (text.is_null(r))
      out.push_null();
    else if (all_boolean)
      out.push_boolean(text.text[r] == "true");
    else if (all_integer)
      out.push_integer(std::stoll(text.text[r]));
    else
      out.push_real(parse_real(text.text[r], x) ? x : 0.0);
  }
  return out;
}

}  // namespace rungcal::python
