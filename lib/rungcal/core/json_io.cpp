// SPDX-License-Identifier: MIT
#include "rungcal/core/json_io.hpp"

#include <algorithm>
#include <cmath>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

// The deepest nesting of [ and { outside strings (RFC 8259: strings are quoted, with
// backslash escapes), stopping as soon as it passes limit.
int nesting_depth(const std::string& text, int limit) {
  int depth = 0, deepest = 0;
  bool in_string = false;
  for (std::size_t i = 0; i < text.size(); ++i) {
    const char c = text[i];
    if (in_string) {
      if (c == '\\')
        ++i;
      else if (c == '"')
        in_string = false;
      continue;
    }
    if (c == '"') {
      in_string = true;
    } else if (c == '[' || c == '{') {
      deepest = std::max(deepest, ++depth);
      if (deepest > limit) return deepest;
    } else if (c == ']' || c == '}') {
      --depth;
    }
  }
  return deepest;
}

}  // namespace

nlohmann::json parse_json(const std::string& text, const std::string& path) {
  if (nesting_depth(text, kMaxJsonDepth) > kMaxJsonDepth)
    throw InputError({path, {}, {}}, "json_too_deep",
                     fmt::format("arrays and objects nest more than {} deep", kMaxJsonDepth));
  try {
    return nlohmann::json::parse(text);
  } catch (const nlohmann::json::exception& e) {
    // parse_error, and out_of_range 406 for a number no double holds (1e400).
    throw InputError({path, {}, {}}, "json_syntax", e.what());
  }
}

nlohmann::json read_json_file(const std::string& path) {
  return parse_json(read_input_file(path), path);
}

nlohmann::json json_number_or_null(double value) {
  return std::isfinite(value) ? nlohmann::json(value) : nlohmann::json(nullptr);
}

std::optional<double> json_optional_number(const nlohmann::json& object, const char* key) {
  auto it = object.find(key);
  if (it == object.end() || !it->is_number()) return std::nullopt;
  return it->get<double>();
}

std::string json_string_or_empty(const nlohmann::json& object, const char* key) {
  auto it = object.find(key);
  return it != object.end() && it->is_string() ? it->get<std::string>() : std::string();
}

}  // namespace rungcal
