// SPDX-License-Identifier: MIT
#pragma once

#include <array>
#include <optional>
#include <string>
#include <string_view>
#include <utility>

namespace rungcal {

// A fixed two-way table between an enum and the names config files and outputs use for it,
// so parsing and writing can never disagree.
template <typename Enum, std::size_t N>
struct EnumTable {
  std::array<std::pair<Enum, std::string_view>, N> entries;

  std::optional<Enum> parse(std::string_view name) const {
    for (const auto& [value, text] : entries)
      if (text == name) return value;
    return std::nullopt;
  }
  std::string_view name(Enum value) const {
    for (const auto& [v, text] : entries)
      if (v == value) return text;
    return "?";
  }
  // "a, b, c": for error messages that list the allowed choices.
  std::string choices() const {
    std::string out;
    for (const auto& entry : entries) {
      if (!out.empty()) out += ", ";
      out += entry.second;
    }
    return out;
  }
};

}  // namespace rungcal
