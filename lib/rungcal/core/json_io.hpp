// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>

#include <nlohmann/json.hpp>

namespace rungcal {

// Deepest nesting of arrays and objects accepted in a JSON file rungcal reads. rungcal's own
// files nest a handful of levels; a file nested 100,000 deep parsed, then overflowed the
// stack where the document was copied or destroyed (issue 15).
inline constexpr int kMaxJsonDepth = 64;

// Parses JSON text read from path. Throws InputError: "json_too_deep" (nesting beyond
// kMaxJsonDepth, checked before parsing), "json_syntax" (malformed, or a number beyond the
// range of a double such as 1e400).
nlohmann::json parse_json(const std::string& text, const std::string& path);

// Reads and parses a JSON file (check_input_file first: a folder or FIFO is refused).
nlohmann::json read_json_file(const std::string& path);

// A number as rungcal's JSON writes one that may be undefined: NaN or infinite as null.
nlohmann::json json_number_or_null(double value);
// The number at key, std::nullopt when the key is absent, null or not a number.
std::optional<double> json_optional_number(const nlohmann::json& object, const char* key);
// The string at key, "" when the key is absent or not a string.
std::string json_string_or_empty(const nlohmann::json& object, const char* key);

}  // namespace rungcal
