// SPDX-License-Identifier: MIT
// The rows of a VOTable BINARY or BINARY2 stream, once its base64 is decoded. Format: IVOA
// Recommendation "VOTable Format Definition", version 1.4 (2019): section 2.1 (the
// primitive datatypes and their sizes), 2.2 (arraysize), 5.3 to 5.5 (the binary
// serializations).
#include <algorithm>
#include <bit>
#include <charconv>
#include <cmath>
#include <cstring>
#include <limits>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/table/votable_parts.hpp"

namespace rungcal {
namespace {

enum class Primitive {
  kBoolean,
  kBit,
  kUnsignedByte,
  kShort,
  kInt,
  kLong,
  kChar,
  kUnicodeChar,
  kFloat,
  kDouble,
  kFloatComplex,
  kDoubleComplex
};

struct PrimitiveSize {
  const char* datatype;
  Primitive kind;
  std::size_t bytes;  // per element; a bit array packs eight to a byte
};

// VOTable 1.4, section 2.1, the table of primitive datatypes and their sizes in the binary
// serializations.
constexpr PrimitiveSize kPrimitives[] = {
    {"boolean", Primitive::kBoolean, 1},
    {"bit", Primitive::kBit, 1},
    {"unsignedByte", Primitive::kUnsignedByte, 1},
    {"short", Primitive::kShort, 2},
    {"int", Primitive::kInt, 4},
    {"long", Primitive::kLong, 8},
    {"char", Primitive::kChar, 1},
    {"unicodeChar", Primitive::kUnicodeChar, 2},
    {"float", Primitive::kFloat, 4},
    {"double", Primitive::kDouble, 8},
    {"floatComplex", Primitive::kFloatComplex, 8},
    {"doubleComplex", Primitive::kDoubleComplex, 16},
};

// More elements than this in one value is taken for a broken arraysize, not a real column.
constexpr std::uint64_t kMostElements = std::uint64_t{1} << 31;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// How one FIELD's value sits in a row.
struct FieldLayout {
  Primitive kind = Primitive::kDouble;
  std::size_t element_bytes = 0;
  bool variable = false;    // preceded by its count (arraysize ending in "*")
  std::uint64_t fixed = 1;  // elements per count: the product of the fixed dimensions
  std::uint64_t most = 0;   // variable: the most counts the arraysize allows ("n*"), 0 none
  std::optional<std::int64_t> null_integer;  // an integer FIELD's VALUES null
};

// The dimensions of an arraysize (VOTable 1.4, section 2.2): "", "n", "*", "n*", "AxB",
// "AxB*", ...; only the last may be variable. False when it is none of these.
bool parse_arraysize(std::string_view text, FieldLayout& layout) {
  if (text.empty()) return true;
  std::size_t start = 0;
  while (true) {
    const std::size_t x = text.find('x', start);
    std::string_view dim = text.substr(start, x == std::string_view::npos ? x : x - start);
    const bool last = x == std::string_view::npos;
    const bool star = !dim.empty() && dim.back() == '*';
    if (star) {
      if (!last) return false;
      dim.remove_suffix(1);
    }
    std::uint64_t n = 0;
    if (!dim.empty()) {
      const auto [end, ec] = std::from_chars(dim.data(), dim.data() + dim.size(), n);
      if (ec != std::errc() || end != dim.data() + dim.size() || n > kMostElements) return false;
    } else if (!star) {
      return false;
    }
    if (star) {
      layout.variable = true;
      layout.most = n;
    } else {
      layout.fixed *= n;
      if (layout.fixed > kMostElements) return false;
    }
    if (last) return true;
    start = x + 1;
  }
}

std::uint64_t unsigned_from_big_endian(std::string_view b) {
  std::uint64_t v = 0;
  for (const char c : b) v = v << 8 | static_cast<unsigned char>(c);
  return v;
}

// Two's complement of b.size() bytes, big-endian.
std::int64_t signed_from_big_endian(std::string_view b) {
  const std::uint64_t u = unsigned_from_big_endian(b);
  const unsigned bits = static_cast<unsigned>(8 * b.size());
  if (bits == 64) return static_cast<std::int64_t>(u);
  const std::uint64_t sign = std::uint64_t{1} << (bits - 1);
  return static_cast<std::int64_t>(u ^ sign) - static_cast<std::int64_t>(sign);
}

double real_from_big_endian(std::string_view b) {
  if (b.size() == 4)
    return std::bit_cast<float>(static_cast<std::uint32_t>(unsigned_from_big_endian(b)));
  return std::bit_cast<double>(unsigned_from_big_endian(b));
}

bool is_integer(Primitive k) {
  return k == Primitive::kUnsignedByte || k == Primitive::kShort || k == Primitive::kInt ||
         k == Primitive::kLong;
}

void append_utf8(std::string& out, std::uint32_t code) {
  if (code < 0x80) {
    out.push_back(static_cast<char>(code));
  } else if (code < 0x800) {
    out.push_back(static_cast<char>(0xC0 | code >> 6));
    out.push_back(static_cast<char>(0x80 | (code & 0x3F)));
  } else if (code < 0x10000) {
    out.push_back(static_cast<char>(0xE0 | code >> 12));
    out.push_back(static_cast<char>(0x80 | (code >> 6 & 0x3F)));
    out.push_back(static_cast<char>(0x80 | (code & 0x3F)));
  } else {
    out.push_back(static_cast<char>(0xF0 | code >> 18));
    out.push_back(static_cast<char>(0x80 | (code >> 12 & 0x3F)));
    out.push_back(static_cast<char>(0x80 | (code >> 6 & 0x3F)));
    out.push_back(static_cast<char>(0x80 | (code & 0x3F)));
  }
}

// The rows of one stream, read value by value.
class BinaryRows {
 public:
  BinaryRows(std::string_view bytes, VotableStream kind, const std::vector<VotableField>& fields,
             const std::vector<Column*>& columns, const std::string& file, SourceTable& out)
      : bytes_(bytes), kind_(kind), fields_(fields), columns_(columns), file_(file), out_(out) {
    for (std::size_t c = 0; c < fields.size(); ++c) layouts_.push_back(layout_of(fields[c]));
  }

  void read_all() {
    const std::size_t mask_bytes = kind_ == VotableStream::kBinary2 ? (fields_.size() + 7) / 8 : 0;
    while (pos_ < bytes_.size()) {
      ++row_;
      const std::size_t row_start = pos_;
      const std::string_view mask = take(mask_bytes, "", "the row's null mask");
      for (std::size_t c = 0; c < fields_.size(); ++c) {
        const bool masked =
            !mask.empty() && (static_cast<unsigned char>(mask[c / 8]) & (0x80u >> (c % 8)));
        read_cell(c, masked);
      }
      // Rows of no bytes would never reach the end of the stream.
      if (pos_ == row_start)
        fail("votable_binary", "", "every FIELD takes no bytes, so the stream has no rows to read");
      out_.source_rows.push_back(row_);
    }
  }

 private:
  [[noreturn]] void fail(const std::string& rule, const std::string& column,
                         const std::string& message) const {
    throw InputError({file_, row_, column, "row"}, rule, message);
  }

  // The FIELD's place in the stream; stops on a FIELD whose size cannot be known, since
  // every FIELD after it would be read from the wrong bytes.
  FieldLayout layout_of(const VotableField& f) const {
    FieldLayout layout;
    const auto* p = std::find_if(std::begin(kPrimitives), std::end(kPrimitives),
                                 [&](const PrimitiveSize& s) { return f.datatype == s.datatype; });
    if (p == std::end(kPrimitives))
      throw InputError({file_, {}, f.name}, "votable_table",
                       fmt::format("datatype '{}' is not a VOTable datatype, so its size in the "
                                   "binary stream, and where the next FIELD starts, are unknown",
                                   f.datatype));
    layout.kind = p->kind;
    layout.element_bytes = p->bytes;
    if (!parse_arraysize(f.arraysize, layout))
      throw InputError({file_, {}, f.name}, "votable_table",
                       fmt::format("arraysize '{}' is not a VOTable arraysize (\"n\", \"*\", "
                                   "\"n*\", \"AxB\", \"AxB*\"; each up to {})",
                                   f.arraysize, kMostElements));
    if (is_integer(layout.kind) && f.null_value) {
      std::int64_t v = 0;
      const std::string& s = *f.null_value;
      const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
      if (ec == std::errc() && end == s.data() + s.size()) layout.null_integer = v;
    }
    return layout;
  }

  std::string_view take(std::size_t n, const std::string& column, const char* what) {
    if (n > bytes_.size() - pos_)
      fail("votable_binary", column,
           fmt::format("the stream ends inside {} ({} bytes needed, {} left): truncated?", what, n,
                       bytes_.size() - pos_));
    const std::string_view b = bytes_.substr(pos_, n);
    pos_ += n;
    return b;
  }

  // The number of elements of this row's value.
  std::uint64_t element_count(const FieldLayout& layout, const std::string& column) {
    if (!layout.variable) return layout.fixed;
    const std::uint64_t counts =
        unsigned_from_big_endian(take(4, column, "an array's element count"));
    if (layout.most > 0 && counts > layout.most)
      fail("votable_binary", column,
           fmt::format("an array of {} elements where the FIELD's arraysize allows {} at most",
                       counts, layout.most));
    return counts * layout.fixed;
  }

  void read_cell(std::size_t c, bool masked) {
    const VotableField& f = fields_[c];
    const FieldLayout& layout = layouts_[c];
    const std::uint64_t n = element_count(layout, f.name);
    const std::uint64_t left = bytes_.size() - pos_;
    if (n > left * 8)  // more elements than even bits could fit (and no overflow below)
      fail("votable_binary", f.name,
           fmt::format("a value of {} elements where the stream has {} bytes left: truncated, "
                       "or a wrong count?",
                       n, left));
    const std::uint64_t size =
        layout.kind == Primitive::kBit ? (n + 7) / 8 : n * layout.element_bytes;
    if (size > bytes_.size() - pos_)
      fail("votable_binary", f.name,
           fmt::format("the value needs {} bytes ({} {} {}) where the stream has {} left: "
                       "truncated, or a wrong count?",
                       size, n, f.datatype, n == 1 ? "element" : "elements", bytes_.size() - pos_));
    const std::string_view data = take(static_cast<std::size_t>(size), f.name, "a value");
    if (f.array) {
      f.array->rows.push_back(masked ? std::vector<double>{} : elements(f, layout, data, n));
    } else if (columns_[c]) {
      push_value(*columns_[c], f, layout, data, masked);
    }
  }

  void push_value(Column& col, const VotableField& f, const FieldLayout& layout,
                  std::string_view data, bool masked) const {
    if (masked) {
      col.push_null();
      return;
    }
    if (col.type == ColumnType::kText) {
      std::string s = layout.kind == Primitive::kUnicodeChar
                          ? utf8_from_ucs2(f, data)
                          : std::string(data.substr(0, data.find('\0')));
      if (s.empty() || (f.null_value && s == *f.null_value))
        col.push_null();
      else
        col.push_text(std::move(s));
      return;
    }
    if (data.empty()) {  // a fixed arraysize of 0
      col.push_null();
      return;
    }
    const double v = element(f, layout, data, 0);
    if (std::isnan(v))
      col.push_null();
    else if (col.type == ColumnType::kInteger)
      col.push_integer(signed_or_unsigned(layout, data.substr(0, layout.element_bytes)));
    else if (col.type == ColumnType::kBoolean)
      col.push_boolean(v != 0);
    else
      col.push_real(v);
  }

  static std::int64_t signed_or_unsigned(const FieldLayout& layout, std::string_view b) {
    return layout.kind == Primitive::kUnsignedByte
               ? static_cast<std::int64_t>(unsigned_from_big_endian(b))
               : signed_from_big_endian(b);
  }

  std::vector<double> elements(const VotableField& f, const FieldLayout& layout,
                               std::string_view data, std::uint64_t n) const {
    std::vector<double> v;
    v.reserve(static_cast<std::size_t>(n));
    for (std::uint64_t i = 0; i < n; ++i)
      v.push_back(element(f, layout, data, static_cast<std::size_t>(i)));
    return v;
  }

  // Element i of a value as a double: NaN for a null (the integer null value, a boolean
  // '?', space or NUL). A bit array packs its elements most significant bit first; a single
  // bit fills a byte, true when any of its bits is set (writers differ in which one).
  double element(const VotableField& f, const FieldLayout& layout, std::string_view data,
                 std::size_t i) const {
    if (layout.kind == Primitive::kBit) {
      const auto byte = static_cast<unsigned char>(data[i / 8]);
      if (data.size() == 1 && layout.fixed == 1 && !layout.variable) return byte != 0 ? 1 : 0;
      return (byte & (0x80u >> (i % 8))) != 0 ? 1 : 0;
    }
    const std::string_view b = data.substr(i * layout.element_bytes, layout.element_bytes);
    if (layout.kind == Primitive::kBoolean) return boolean_value(f, b[0]);
    if (layout.kind == Primitive::kFloat || layout.kind == Primitive::kDouble)
      return real_from_big_endian(b);
    const std::int64_t x = signed_or_unsigned(layout, b);
    if (layout.null_integer && x == *layout.null_integer) return kNaN;
    return static_cast<double>(x);
  }

  // VOTable 1.4, section 2.1: 'T', 't', '1' true; 'F', 'f', '0' false; '?', space, NUL null.
  double boolean_value(const VotableField& f, char c) const {
    switch (c) {
      case 'T':
      case 't':
      case '1':
        return 1;
      case 'F':
      case 'f':
      case '0':
        return 0;
      case '?':
      case ' ':
      case '\0':
        return kNaN;
      default:
        fail("votable_value", f.name,
             fmt::format("byte {} is not a boolean (T, F, 1, 0, t, f; ?, space or NUL for null)",
                         static_cast<unsigned>(static_cast<unsigned char>(c))));
    }
  }

  // unicodeChar: UCS-2, big-endian (VOTable 1.4, section 2.1); surrogate pairs (UTF-16, as
  // VOTable 1.5 has it) are joined. Ends at the first U+0000, as a fixed width is padded.
  std::string utf8_from_ucs2(const VotableField& f, std::string_view data) const {
    std::string out;
    for (std::size_t i = 0; i + 1 < data.size(); i += 2) {
      std::uint32_t code = static_cast<std::uint32_t>(unsigned_from_big_endian(data.substr(i, 2)));
      if (code == 0) break;
      if (code >= 0xD800 && code < 0xDC00 && i + 3 < data.size()) {
        const auto low =
            static_cast<std::uint32_t>(unsigned_from_big_endian(data.substr(i + 2, 2)));
        if (low >= 0xDC00 && low < 0xE000) {
          code = 0x10000 + ((code - 0xD800) << 10) + (low - 0xDC00);
          i += 2;
        }
      }
      if (code >= 0xD800 && code < 0xE000)
        fail("votable_value", f.name,
             fmt::format("unicodeChar {:#06x} is half of a surrogate pair, without its other half",
                         code));
      append_utf8(out, code);
    }
    return out;
  }

  std::string_view bytes_;
  VotableStream kind_;
  const std::vector<VotableField>& fields_;
  const std::vector<Column*>& columns_;
  const std::string& file_;
  SourceTable& out_;
  std::vector<FieldLayout> layouts_;
  std::size_t pos_ = 0;
  std::int64_t row_ = 0;
};

}  // namespace

void read_votable_binary_rows(std::string_view bytes, VotableStream kind,
                              const std::vector<VotableField>& fields,
                              const std::vector<Column*>& columns, const std::string& file,
                              SourceTable& out) {
  BinaryRows(bytes, kind, fields, columns, file, out).read_all();
}

}  // namespace rungcal
