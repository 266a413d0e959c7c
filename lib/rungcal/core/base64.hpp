// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <string_view>

namespace rungcal {

// The bytes of a base64 text, or where and why it is not base64.
struct Base64Decoded {
  std::string bytes;
  std::optional<std::size_t> bad_offset;  // set on failure: the offset in the text
  std::string problem;                    // set on failure: what is wrong there
  bool ok() const { return !bad_offset; }
};

// Decodes base64 (RFC 4648, section 4: the alphabet A-Z a-z 0-9 + /, "=" padding). XML
// whitespace (space, tab, CR, LF) anywhere is skipped, as a VOTable STREAM breaks its text
// into lines (VOTable 1.4, section 5.1). The padding may be left off (RFC 4648, section
// 3.2 lets a format do without it); a final group of one character, a "=" inside the text,
// or any other character is an error. Written here rather than taken from a library: no
// Debian base64 library is among the project's dependencies, OpenSSL's EVP_DecodeBlock
// neither skips line breaks nor says where a text goes wrong, and the rules fit on a page.
Base64Decoded decode_base64(std::string_view text);

// The base64 text of bytes (RFC 4648, section 4), padded, on one line: for tests and the
// fuzz targets, which write VOTable STREAMs.
std::string encode_base64(std::string_view bytes);

}  // namespace rungcal
