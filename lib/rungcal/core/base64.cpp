// SPDX-License-Identifier: MIT
#include "rungcal/core/base64.hpp"

#include <algorithm>
#include <array>
#include <cstdint>

namespace rungcal {
namespace {

constexpr std::int8_t kNotBase64 = -1;
constexpr const char* kAlphabet =
    "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";

// RFC 4648, table 1: the value of each alphabet character, kNotBase64 for the others.
constexpr std::array<std::int8_t, 256> base64_values() {
  std::array<std::int8_t, 256> v{};
  for (auto& x : v) x = kNotBase64;
  for (int i = 0; i < 64; ++i)
    v[static_cast<unsigned char>(kAlphabet[i])] = static_cast<std::int8_t>(i);
  return v;
}

constexpr std::array<std::int8_t, 256> kValues = base64_values();

bool is_xml_space(char c) { return c == ' ' || c == '\t' || c == '\r' || c == '\n'; }

Base64Decoded failure(std::size_t offset, std::string problem) {
  Base64Decoded d;
  d.bad_offset = offset;
  d.problem = std::move(problem);
  return d;
}

}  // namespace

Base64Decoded decode_base64(std::string_view text) {
  Base64Decoded out;
  out.bytes.reserve(text.size() / 4 * 3 + 3);
  std::uint32_t group = 0;  // the 6-bit values of the current group of four, high first
  int in_group = 0;
  int padding = 0;
  std::size_t last = 0;  // offset of the last character that counts
  for (std::size_t i = 0; i < text.size(); ++i) {
    const char c = text[i];
    if (is_xml_space(c)) continue;
    last = i;
    if (c == '=') {
      // Padding completes a group of two or three characters (RFC 4648, section 4).
      if (in_group + padding < 2)
        return failure(i, "'=' where a base64 group has fewer than two characters");
      ++padding;
      if (in_group + padding > 4) return failure(i, "more '=' than a base64 group has room for");
      continue;
    }
    if (padding > 0) return failure(i, "a base64 character after the '=' padding");
    const std::int8_t v = kValues[static_cast<unsigned char>(c)];
    if (v == kNotBase64) {
      const auto code = static_cast<unsigned>(static_cast<unsigned char>(c));
      return failure(i, code >= 32 && code < 127
                            ? std::string("'") + c + "' is not a base64 character"
                            : "byte " + std::to_string(code) + " is not a base64 character");
    }
    group = group << 6 | static_cast<std::uint32_t>(v);
    if (++in_group == 4) {
      out.bytes.push_back(static_cast<char>(group >> 16 & 0xFF));
      out.bytes.push_back(static_cast<char>(group >> 8 & 0xFF));
      out.bytes.push_back(static_cast<char>(group & 0xFF));
      group = 0;
      in_group = 0;
    }
  }
  if (padding > 0 && in_group + padding != 4)
    return failure(last, "the '=' padding does not complete a group of four");
  if (in_group == 1) return failure(last, "the text ends with a lone base64 character: truncated?");
  // A final group of two characters holds one byte, of three two bytes (RFC 4648, section 4).
  if (in_group == 2) out.bytes.push_back(static_cast<char>(group >> 4 & 0xFF));
  if (in_group == 3) {
    out.bytes.push_back(static_cast<char>(group >> 10 & 0xFF));
    out.bytes.push_back(static_cast<char>(group >> 2 & 0xFF));
  }
  return out;
}

std::string encode_base64(std::string_view bytes) {
  std::string out;
  out.reserve((bytes.size() + 2) / 3 * 4);
  for (std::size_t i = 0; i < bytes.size(); i += 3) {
    const std::size_t n = std::min<std::size_t>(3, bytes.size() - i);
    std::uint32_t group = 0;
    for (std::size_t k = 0; k < 3; ++k)
      group = group << 8 | (k < n ? static_cast<unsigned char>(bytes[i + k]) : 0u);
    // n bytes fill n + 1 characters; "=" pads the group to four.
    for (std::size_t k = 0; k < 4; ++k)
      out.push_back(k <= n ? kAlphabet[group >> (18 - 6 * k) & 0x3F] : '=');
  }
  return out;
}

}  // namespace rungcal
