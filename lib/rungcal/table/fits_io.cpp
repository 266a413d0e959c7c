// SPDX-License-Identifier: MIT
#include "rungcal/table/fits_io.hpp"

#include <fitsio.h>

#include <unistd.h>

#include <algorithm>
#include <bit>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <limits>
#include <memory>
#include <optional>
#include <set>
#include <string_view>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

constexpr std::int64_t kIntegerNull = std::numeric_limits<std::int64_t>::min();

std::string cfitsio_message(int status) {
  char text[FLEN_STATUS] = {0};
  fits_get_errstatus(status, text);
  std::string out = text;
  char msg[FLEN_ERRMSG];
  while (fits_read_errmsg(msg)) {
    if (std::strlen(msg)) out += std::string("; ") + msg;
  }
  return out;
}

void check_status(int status, const std::string& path, const std::string& what,
                  const std::string& column = "") {
  if (status == 0) return;
  throw InputError({path, {}, column}, "fits_read",
                   fmt::format("{}: {}", what, cfitsio_message(status)));
}

// Structural keywords that describe the table itself, not its content.
bool is_structural_keyword(const std::string& k) {
  static const char* const kFixed[] = {"XTENSION", "BITPIX",  "NAXIS",    "PCOUNT",   "GCOUNT",
                                       "TFIELDS",  "EXTNAME", "SIMPLE",   "EXTEND",   "COMMENT",
                                       "HISTORY",  "",        "LONGSTRN", "CONTINUE", "END"};
  for (const char* f : kFixed)
    if (k == f) return true;
  if (k.rfind("NAXIS", 0) == 0) return true;
  static const char* const kIndexed[] = {"TTYPE", "TFORM", "TUNIT", "TNULL",
                                         "TDISP", "TSCAL", "TZERO", "TDIM"};
  for (const char* p : kIndexed) {
    std::size_t n = std::strlen(p);
    if (k.size() > n && k.compare(0, n, p) == 0 &&
        std::all_of(k.begin() + static_cast<std::ptrdiff_t>(n), k.end(), ::isdigit))
      return true;
  }
  return false;
}

void read_header_keywords(fitsfile* f, const std::string& path, StarTable& table) {
  int status = 0, nkeys = 0, more = 0;
  fits_get_hdrspace(f, &nkeys, &more, &status);
  check_status(status, path, "reading the header");
  for (int i = 1; i <= nkeys; ++i) {
    char name[FLEN_KEYWORD], value[FLEN_VALUE], comment[FLEN_COMMENT];
    fits_read_keyn(f, i, name, value, comment, &status);
    check_status(status, path, "reading a header keyword");
    std::string key = name;
    if (is_structural_keyword(key) || std::strlen(value) == 0) continue;
    char dtype = 0;
    fits_get_keytype(value, &dtype, &status);
    if (status) {
      status = 0;
      continue;
    }
    if (dtype == 'C') {
      char* longstr = nullptr;
      fits_read_key_longstr(f, name, &longstr, comment, &status);
      std::string v = longstr ? longstr : "";
      if (longstr) fits_free_memory(longstr, &status);
      check_status(status, path, "reading keyword " + key);
      table.set_keyword(key, v, comment);
    } else if (dtype == 'L') {
      table.set_keyword(key, std::string(value) == "T", comment);
    } else if (dtype == 'I' || dtype == 'F') {
      // A number out of range (a fuzzer found one) is kept as its text, not thrown on.
      errno = 0;
      char* end = nullptr;
      const long long integer = dtype == 'I' ? std::strtoll(value, &end, 10) : 0;
      const double d = dtype == 'F' ? std::strtod(value, &end) : 0.0;
      if (errno == ERANGE || end == value)
        table.set_keyword(key, std::string(value), comment);
      else if (dtype == 'I')
        table.set_keyword(key, static_cast<std::int64_t>(integer), comment);
      else
        table.set_keyword(key, d, comment);
    }
  }
}

std::string read_string_key(fitsfile* f, const std::string& key) {
  int status = 0;
  char value[FLEN_VALUE] = {0};
  fits_read_key(f, TSTRING, key.c_str(), value, nullptr, &status);
  return status ? "" : std::string(value);
}

void move_to_hdu(fitsfile* f, const std::string& path, const FitsHduChoice& hdu) {
  int status = 0, hdutype = 0;
  if (!hdu.name.empty()) {
    fits_movnam_hdu(f, ANY_HDU, const_cast<char*>(hdu.name.c_str()), 0, &status);
    if (status == BAD_HDU_NUM)
      throw InputError({path, {}, {}}, "fits_hdu",
                       fmt::format("the file has no HDU named '{}'", hdu.name));
    check_status(status, path, "moving to HDU " + hdu.name);
    fits_get_hdu_type(f, &hdutype, &status);
  } else if (hdu.index > 0) {
    fits_movabs_hdu(f, hdu.index + 1, &hdutype, &status);
    if (status == END_OF_FILE || status == BAD_HDU_NUM)
      throw InputError({path, {}, {}}, "fits_hdu",
                       fmt::format("the file has no extension number {}", hdu.index));
    check_status(status, path, fmt::format("moving to extension {}", hdu.index));
  } else {
    int n = 0;
    fits_get_num_hdus(f, &n, &status);
    check_status(status, path, "counting HDUs");
    for (int i = 2; i <= n; ++i) {
      fits_movabs_hdu(f, i, &hdutype, &status);
      check_status(status, path, "moving between HDUs");
      if (hdutype == BINARY_TBL) return;
    }
    throw InputError({path, {}, {}}, "fits_hdu", "the file has no binary table extension");
  }
  if (hdutype != BINARY_TBL)
    throw InputError({path, {}, {}}, "fits_hdu", "the chosen HDU is not a binary table");
}

// Reads rows first .. first + nrows - 1 (1-based) of one column.
void read_column(fitsfile* f, const std::string& path, int colnum, LONGLONG first, LONGLONG nrows,
                 SourceTable& out) {
  int status = 0, typecode = 0;
  LONGLONG repeat = 0, width = 0;
  char ttype[FLEN_VALUE] = {0};
  fits_read_key(f, TSTRING, fmt::format("TTYPE{}", colnum).c_str(), ttype, nullptr, &status);
  check_status(status, path, fmt::format("reading the name of column {}", colnum));
  std::string name = ttype;
  fits_get_eqcoltypell(f, colnum, &typecode, &repeat, &width, &status);
  check_status(status, path, "reading the column type", name);
  std::string unit = read_string_key(f, fmt::format("TUNIT{}", colnum));
  auto n = static_cast<std::size_t>(nrows);
  std::vector<char> nulls(n, 0);
  int anynul = 0;

  if (typecode == TSTRING) {
    // One call for all the rows: a buffer of fixed-width strings and a pointer to each.
    const std::size_t w = static_cast<std::size_t>(width) + 1;
    std::vector<char> buf(n * w, 0);
    std::vector<char*> ptrs(n);
    for (std::size_t r = 0; r < n; ++r) ptrs[r] = buf.data() + r * w;
    Column& col = out.table.add_column(name, ColumnType::kText, unit);
    col.resize(n);
    if (n > 0) {
      fits_read_col_str(f, colnum, first, 1, nrows, const_cast<char*>(""), ptrs.data(), &anynul,
                        &status);
      check_status(status, path, fmt::format("reading rows {} to {}", first, first + nrows - 1),
                   name);
    }
    for (std::size_t r = 0; r < n; ++r) {
      std::string v = ptrs[r];
      while (!v.empty() && v.back() == ' ') v.pop_back();
      col.null[r] = v.empty() ? 1 : 0;
      col.text[r] = std::move(v);
    }
    return;
  }
  if (repeat != 1) {
    out.unusable_columns[name] =
        fmt::format("a vector column ({} values per row) cannot be mapped", repeat);
    return;
  }
  if (nrows == 0) {
    out.table.add_column(name, ColumnType::kReal, unit);
    return;
  }
  if (typecode == TLOGICAL) {
    std::vector<char> v(n, 0);
    fits_read_colnull_log(f, colnum, first, 1, nrows, v.data(), nulls.data(), &anynul, &status);
    check_status(status, path, "reading", name);
    Column& col = out.table.add_column(name, ColumnType::kBoolean, unit);
    col.resize(n);
    for (std::size_t r = 0; r < n; ++r) {
      col.boolean[r] = v[r] ? 1 : 0;
      col.null[r] = nulls[r] ? 1 : 0;
    }
  } else if (typecode == TFLOAT || typecode == TDOUBLE) {
    Column& col = out.table.add_column(name, ColumnType::kReal, unit);
    col.resize(n);
    fits_read_colnull_dbl(f, colnum, first, 1, nrows, col.real.data(), nulls.data(), &anynul,
                          &status);
    check_status(status, path, "reading", name);
    for (std::size_t r = 0; r < n; ++r) {
      bool is_null = nulls[r] || std::isnan(col.real[r]);
      col.null[r] = is_null ? 1 : 0;
      if (is_null) col.real[r] = std::numeric_limits<double>::quiet_NaN();
    }
  } else if (typecode == TBYTE || typecode == TSBYTE || typecode == TSHORT || typecode == TUSHORT ||
             typecode == TINT || typecode == TUINT || typecode == TLONG || typecode == TULONG ||
             typecode == TLONGLONG) {
    Column& col = out.table.add_column(name, ColumnType::kInteger, unit);
    col.resize(n);
    std::vector<LONGLONG> v(n, 0);
    fits_read_colnull_lnglng(f, colnum, first, 1, nrows, v.data(), nulls.data(), &anynul, &status);
    check_status(status, path, "reading", name);
    for (std::size_t r = 0; r < n; ++r) {
      col.integer[r] = v[r];
      col.null[r] = nulls[r] ? 1 : 0;
    }
  } else {
    out.unusable_columns[name] = fmt::format("FITS column type code {} is not supported", typecode);
  }
}

// The TFORM of a column whose text values (if any) are `width` bytes wide.
std::string tform_for(const Column& c, std::size_t width) {
  switch (c.type) {
    case ColumnType::kReal: return "1D";
    case ColumnType::kInteger: return "1K";
    case ColumnType::kBoolean: return "1L";
    case ColumnType::kText: return fmt::format("{}A", width);
  }
  return "1D";
}

// Bytes per row of a column whose text values (if any) are `width` bytes wide.
std::size_t field_width(const Column& c, std::size_t width) {
  switch (c.type) {
    case ColumnType::kReal:
    case ColumnType::kInteger: return 8;
    case ColumnType::kBoolean: return 1;
    case ColumnType::kText: return width;
  }
  return 0;
}

void throw_write_status(int status, const std::string& path, const std::string& what) {
  // cfitsio says only "error writing to FITS file"; the system's reason (a full disk, a
  // quota, an I/O error) is in errno.
  const int e = errno;
  const std::string why =
      e == ENOSPC || e == EDQUOT || e == EIO || e == EFBIG ? " (" + errno_text(e) + ")" : "";
  throw WriteError({path, {}, {}}, fmt::format("{}: {}{}", what, cfitsio_message(status), why));
}

void write_keyword(fitsfile* f, const Keyword& k, const std::string& path) {
  int status = 0;
  // Names longer than 8 characters: cfitsio writes HIERARCH cards when asked this way.
  std::string key = k.key.size() > 8 ? "HIERARCH " + k.key : k.key;
  const char* comment = k.comment.empty() ? nullptr : k.comment.c_str();
  std::visit(
      [&](const auto& v) {
        using T = std::decay_t<decltype(v)>;
        if constexpr (std::is_same_v<T, std::string>) {
          if (v.size() > 68 && key.size() <= 8) {
            fits_write_key_longstr(f, key.c_str(), v.c_str(), comment, &status);
          } else {
            fits_write_key(f, TSTRING, key.c_str(), const_cast<char*>(v.c_str()), comment, &status);
          }
        } else if constexpr (std::is_same_v<T, double>) {
          double x = v;
          fits_write_key(f, TDOUBLE, key.c_str(), &x, comment, &status);
        } else if constexpr (std::is_same_v<T, std::int64_t>) {
          LONGLONG x = v;
          fits_write_key(f, TLONGLONG, key.c_str(), &x, comment, &status);
        } else {
          int x = v ? 1 : 0;
          fits_write_key(f, TLOGICAL, key.c_str(), &x, comment, &status);
        }
      },
      k.value);
  if (status) throw_write_status(status, path, "writing keyword " + k.key);
}

// Bytes per row of each column, text widths as given (at least 1).
std::vector<std::size_t> field_widths(const StarTable& t, const std::vector<std::size_t>& text_widths) {
  std::vector<std::size_t> w;
  for (std::size_t c = 0; c < t.columns(); ++c) {
    const Column& col = t.column(c);
    w.push_back(field_width(col, std::max<std::size_t>(1, text_widths[c])));
  }
  return w;
}

// The widest value of each text column (0 for other columns).
std::vector<std::size_t> widest_text(const StarTable& t) {
  std::vector<std::size_t> w(t.columns(), 0);
  for (std::size_t c = 0; c < t.columns(); ++c) {
    const Column& col = t.column(c);
    if (col.type != ColumnType::kText) continue;
    for (std::size_t r = 0; r < col.size(); ++r)
      if (!col.is_null(r)) w[c] = std::max(w[c], col.text[r].size());
  }
  return w;
}

// A binary table HDU for t's columns with nrows rows, room for extra_keys more header
// keywords, the column descriptions and integer TNULLs; no data written.
void create_table_hdu(fitsfile* f, const std::string& extname, const StarTable& t,
                      const std::vector<std::size_t>& widths, LONGLONG nrows, int extra_keys,
                      const std::string& path) {
  int status = 0;
  std::vector<std::string> names, forms, units;
  for (std::size_t c = 0; c < t.columns(); ++c) {
    const Column& col = t.column(c);
    names.push_back(col.name);
    forms.push_back(tform_for(col, widths[c]));
    units.push_back(col.unit);
  }
  std::vector<char*> pn, pf, pu;
  for (std::size_t c = 0; c < names.size(); ++c) {
    pn.push_back(names[c].data());
    pf.push_back(forms[c].data());
    pu.push_back(units[c].data());
  }
  fits_create_tbl(f, BINARY_TBL, nrows, static_cast<int>(names.size()), pn.data(), pf.data(),
                  pu.data(), extname.c_str(), &status);
  if (extra_keys > 0) fits_set_hdrsize(f, extra_keys, &status);
  if (status) throw_write_status(status, path, "creating table " + extname);
  for (std::size_t c = 0; c < t.columns(); ++c) {
    const Column& col = t.column(c);
    const int colnum = static_cast<int>(c) + 1;
    if (!col.description.empty())
      fits_modify_comment(f, fmt::format("TTYPE{}", colnum).c_str(), col.description.c_str(),
                          &status);
    if (col.type == ColumnType::kInteger) {
      LONGLONG tnull = kIntegerNull;
      fits_write_key(f, TLONGLONG, fmt::format("TNULL{}", colnum).c_str(), &tnull,
                     "value of null entries", &status);
      fits_set_btblnull(f, colnum, kIntegerNull, &status);
    }
    if (status) throw_write_status(status, path, "describing column " + col.name);
  }
}

// FITS stores numbers big-endian (FITS Standard 4.0, section 7.3.3).
template <typename T>
void put_big_endian(unsigned char* to, T value) {
  std::uint64_t bits = 0;
  std::memcpy(&bits, &value, sizeof(T));
  for (std::size_t i = 0; i < sizeof(T); ++i)
    to[i] = static_cast<unsigned char>(bits >> (8 * (sizeof(T) - 1 - i)));
}

// Encodes rows [r0, r0 + n) of one column into a buffer of rows row_bytes apart, starting at
// the column's offset. One loop per type, with the type's test outside it.
void encode_column(const Column& col, std::size_t width, std::size_t r0, std::size_t n,
                   std::size_t row_bytes, unsigned char* at) {
  const std::uint8_t* null = col.null.data() + r0;
  switch (col.type) {
    case ColumnType::kReal: {
      const double* v = col.real.data() + r0;
      const double nan = std::numeric_limits<double>::quiet_NaN();
      for (std::size_t i = 0; i < n; ++i, at += row_bytes) put_big_endian(at, null[i] ? nan : v[i]);
      break;
    }
    case ColumnType::kInteger: {
      const std::int64_t* v = col.integer.data() + r0;
      const auto none = static_cast<std::int64_t>(kIntegerNull);
      for (std::size_t i = 0; i < n; ++i, at += row_bytes)
        put_big_endian(at, null[i] ? none : v[i]);
      break;
    }
    case ColumnType::kBoolean: {
      const std::uint8_t* v = col.boolean.data() + r0;
      for (std::size_t i = 0; i < n; ++i, at += row_bytes)
        if (!null[i]) *at = v[i] ? 'T' : 'F';
      break;
    }
    case ColumnType::kText: {
      // Raw bytes padded with NUL, as astropy writes them: cfitsio would pad with blanks,
      // which astropy then hands its users as part of the value.
      const std::string* v = col.text.data() + r0;
      for (std::size_t i = 0; i < n; ++i, at += row_bytes)
        if (!null[i]) std::memcpy(at, v[i].data(), std::min(v[i].size(), width));
      break;
    }
  }
}

// Writes t's rows [begin, end) as rows first_row + 1 .. of the current HDU (which has them),
// encoded into one buffer per block of rows and written in one call: cfitsio's own
// column-by-column writes cross the whole table once per column. A block is small enough
// (256 KiB) to stay in the core's cache while each column is encoded into it.
void write_table_rows(fitsfile* f, const StarTable& t, const std::vector<std::size_t>& widths,
                      LONGLONG first_row, const std::string& path, std::size_t begin,
                      std::size_t end) {
  std::size_t row_bytes = 0;
  for (std::size_t w : widths) row_bytes += w;
  const std::size_t block =
      std::max<std::size_t>(1, (256u << 10) / std::max<std::size_t>(1, row_bytes));
  std::vector<unsigned char> buf;
  for (std::size_t r0 = begin; r0 < end; r0 += block) {
    const std::size_t n = std::min(block, end - r0);
    buf.assign(n * row_bytes, 0);  // NUL: text padding, and a null logical
    std::size_t offset = 0;
    for (std::size_t c = 0; c < t.columns(); ++c) {
      encode_column(t.column(c), widths[c], r0, n, row_bytes, buf.data() + offset);
      offset += widths[c];
    }
    int status = 0;
    fits_write_tblbytes(f, first_row + static_cast<LONGLONG>(r0 - begin) + 1, 1,
                        static_cast<LONGLONG>(buf.size()), buf.data(), &status);
    if (status) throw_write_status(status, path, "writing rows");
  }
}

void write_one_table(fitsfile* f, const std::string& extname, const StarTable& t,
                     const std::string& path) {
  const std::vector<std::size_t> widths = field_widths(t, widest_text(t));
  create_table_hdu(f, extname, t, widths, static_cast<LONGLONG>(t.rows()), 0, path);
  write_table_rows(f, t, widths, 0, path, 0, t.rows());
  for (const auto& k : t.header()) write_keyword(f, k, path);
}

// A binary-table TFORM with a character width of zero ('9A0', the rAw convention) makes
// CCfits divide by it (found by fuzz/fuzz_fits_table): refused here.
void check_tform(const std::string& path, int hdu, const std::string& key,
                 const std::string& value) {
  const auto open = value.find('\''), close = value.find('\'', open + 1);
  if (open == std::string::npos || close == std::string::npos) return;
  std::string tform;
  for (char ch : value.substr(open + 1, close - open - 1))
    if (ch != ' ') tform += ch;
  const auto a = tform.find('A');
  if (a == std::string::npos || a + 1 >= tform.size()) return;
  const std::string width = tform.substr(a + 1);
  if (width.find_first_not_of('0') == std::string::npos)
    throw InputError({path, {}, {}}, "fits_read",
                     fmt::format("HDU {} {} = '{}' has a character width of 0: corrupt header", hdu,
                                 key, tform));
}

// Walks the headers before cfitsio does: every HDU's declared data must lie inside the
// file, and TFIELDS must be within the standard's 0..999 (FITS 4.0, section 7.2.1). A
// corrupt header claiming billions of columns or rows otherwise makes cfitsio try to
// allocate for them (found by fuzz/fuzz_fits_table).
void check_declared_sizes(const std::string& path) {
  constexpr std::uintmax_t kBlock = 2880, kCard = 80;
  std::FILE* f = std::fopen(path.c_str(), "rb");
  if (!f) throw InputError({path, {}, {}}, "unreadable_file", "cannot open the file");
  std::unique_ptr<std::FILE, int (*)(std::FILE*)> closer(f, &std::fclose);
  const std::uintmax_t size = std::filesystem::file_size(path);
  std::uintmax_t offset = 0;
  for (int hdu = 1; offset < size; ++hdu) {
    long long bitpix = 8, naxis = 0, pcount = 0, gcount = 1, tfields = 0;
    std::vector<long long> axes;
    bool bintable = false;
    std::set<long long> named, formed;  // n of each TTYPEn and TFORMn seen
    bool end = false;
    char card[kCard + 1] = {};
    while (!end) {
      if (offset + kCard > size || std::fseek(f, static_cast<long>(offset), SEEK_SET) != 0 ||
          std::fread(card, 1, kCard, f) != kCard)
        throw InputError({path, {}, {}}, "fits_read",
                         fmt::format("HDU {} header has no END card: truncated or corrupt", hdu));
      if (hdu == 1 && offset == 0 && std::strncmp(card, "SIMPLE  =", 9) != 0)
        throw InputError({path, {}, {}}, "fits_read",
                         "not a FITS file: it does not begin with SIMPLE");
      // Header cards are printable ASCII (FITS 4.0, section 4.1.1).
      for (std::size_t i = 0; i < kCard; ++i)
        if (card[i] < 0x20 || card[i] > 0x7E)
          throw InputError({path, {}, {}}, "fits_read",
                           fmt::format("HDU {} header byte {} is not FITS header text: corrupt",
                                       hdu, offset + i));
      offset += kCard;
      const std::string key =
          std::string(card, 8).substr(0, std::string(card, 8).find_last_not_of(' ') + 1);
      if (key == "END") {
        end = true;
        break;
      }
      if (card[8] != '=') continue;
      if (key == "XTENSION")
        bintable = std::string(card + 10, kCard - 10).find("'BINTABLE'") != std::string::npos;
      if (key.rfind("TFORM", 0) == 0) {
        check_tform(path, hdu, key, std::string(card + 10, kCard - 10));
        formed.insert(std::strtoll(key.c_str() + 5, nullptr, 10));
      }
      if (key.rfind("TTYPE", 0) == 0) named.insert(std::strtoll(key.c_str() + 5, nullptr, 10));
      // Keywords CCfits reads as strings must hold a quoted string; an unquoted or
      // unterminated one made it read past its buffer (fuzz finding).
      for (const char* prefix : {"TTYPE", "TFORM", "TUNIT", "TDISP", "EXTNAME", "XTENSION"})
        if (key.rfind(prefix, 0) == 0) {
          const std::string value(card + 10, kCard - 10);
          const auto open = value.find_first_not_of(' ');
          if (card[9] != ' ' || open == std::string::npos || value[open] != '\'' ||
              value.find('\'', open + 1) == std::string::npos)
            throw InputError(
                {path, {}, {}}, "fits_read",
                fmt::format("HDU {} keyword {} does not hold a quoted string: corrupt header", hdu,
                            key));
        }
      const bool structural = key == "BITPIX" || key == "PCOUNT" || key == "GCOUNT" ||
                              key == "TFIELDS" || key.rfind("NAXIS", 0) == 0;
      if (!structural) continue;
      if (card[9] != ' ')  // "= " in bytes 9 and 10 (FITS 4.0, section 4.1.2.2)
        throw InputError(
            {path, {}, {}}, "fits_read",
            fmt::format("HDU {} keyword {} lacks the '= ' value indicator: corrupt header", hdu,
                        key));
      // A structural keyword's value is an integer, then blanks or a comment (FITS 4.0,
      // section 4.2.3): anything else is a corrupt header that cfitsio may misread.
      char* end_of_number = nullptr;
      const long long value = std::strtoll(card + 10, &end_of_number, 10);
      const char* rest = end_of_number;
      while (rest < card + kCard && *rest == ' ') ++rest;
      if (end_of_number == card + 10 || (rest < card + kCard && *rest != '/'))
        throw InputError(
            {path, {}, {}}, "fits_read",
            fmt::format("HDU {} keyword {} has a malformed value '{}': corrupt header", hdu, key,
                        std::string(card + 10, std::min<std::size_t>(20, kCard - 10))));
      if (key == "BITPIX")
        bitpix = value;
      else if (key == "NAXIS")
        naxis = value;
      else if (key == "PCOUNT")
        pcount = value;
      else if (key == "GCOUNT")
        gcount = value;
      else if (key == "TFIELDS")
        tfields = value;
      else if (key.rfind("NAXIS", 0) == 0 && key.size() > 5)
        axes.push_back(value);
    }
    offset = (offset + kBlock - 1) / kBlock * kBlock;
    if (tfields < 0 || tfields > 999)
      throw InputError(
          {path, {}, {}}, "fits_read",
          fmt::format("HDU {} declares TFIELDS = {}; the standard allows 0 to 999", hdu, tfields));
    // Every column of a binary table needs its TFORMn (FITS 4.0, section 7.3.1) and, for
    // rungcal and for CCfits (which reads past its buffer without it: fuzz finding), TTYPEn.
    for (long long c = 1; bintable && c <= tfields; ++c)
      if (!formed.count(c) || !named.count(c))
        throw InputError(
            {path, {}, {}}, "fits_read",
            fmt::format("HDU {} column {} has no {}: every column needs a TFORMn and a TTYPEn", hdu,
                        c,
                        formed.count(c) ? fmt::format("TTYPE{}", c) : fmt::format("TFORM{}", c)));
    if (naxis < 0 || naxis > 999 || static_cast<long long>(axes.size()) < naxis || pcount < 0 ||
        gcount < 0)
      throw InputError({path, {}, {}}, "fits_read",
                       fmt::format("HDU {} has a malformed NAXIS/PCOUNT/GCOUNT header", hdu));
    // Data bytes = |BITPIX|/8 * GCOUNT * (PCOUNT + NAXIS1 * ... * NAXISn), computed in long
    // double so a corrupt header cannot overflow the check itself.
    long double elements = naxis > 0 ? 1.0L : 0.0L;
    for (long long i = 0; i < naxis; ++i)
      elements *= static_cast<long double>(std::max(0LL, axes[static_cast<std::size_t>(i)]));
    const long double bytes = std::abs(static_cast<long double>(bitpix)) / 8.0L *
                              static_cast<long double>(gcount) *
                              (static_cast<long double>(pcount) + elements);
    if (static_cast<long double>(offset) + bytes > static_cast<long double>(size))
      throw InputError({path, {}, {}}, "fits_read",
                       fmt::format("HDU {} declares {:.0f} bytes of data but the file has {} "
                                   "bytes: truncated or corrupt",
                                   hdu, static_cast<double>(bytes), size - std::min(size, offset)));
    offset += static_cast<std::uintmax_t>((bytes + kBlock - 1) / kBlock) * kBlock;
  }
}

struct FitsFileCloser {
  void operator()(fitsfile* f) const {
    int status = 0;
    if (f) fits_close_file(f, &status);
  }
};

// cfitsio's path for a file name taken literally. fits_open_file and fits_create_file parse
// cfitsio's extended filename syntax ("cal[1].fits" would mean HDU 1 of cal, "run(2)/x" a
// template, and a "file://" prefix does not turn that off); fits_open_diskfile does not.
// Its disk driver still expands a leading '~', so such a relative name gets "./".
std::string literal_name(const std::string& path) {
  return !path.empty() && path[0] == '~' ? "./" + path : path;
}

// Opens an existing FITS file by its literal name. Throws InputError "fits_read".
fitsfile* open_literal(const std::string& path, int mode) {
  int status = 0;
  fitsfile* f = nullptr;
  fits_open_diskfile(&f, literal_name(path).c_str(), mode, &status);
  if (status) {
    if (f) {
      int ignored = 0;
      fits_close_file(f, &ignored);
    }
    throw InputError({path, {}, {}}, "fits_read",
                     "not a readable FITS file: " + cfitsio_message(status));
  }
  return f;
}

// The bytes of the primary HDU cfitsio writes for an empty image (fits_create_img with
// BYTE_IMG and no axes): one 2880-byte block, made in memory.
std::string empty_primary_hdu() {
  int status = 0;
  fitsfile* f = nullptr;
  void* buffer = nullptr;
  std::size_t size = 0;
  fits_create_memfile(&f, &buffer, &size, 2880, std::realloc, &status);
  fits_create_img(f, BYTE_IMG, 0, nullptr, &status);
  fits_close_file(f, &status);
  std::string bytes;
  if (status == 0 && buffer && size >= 2880) bytes.assign(static_cast<const char*>(buffer), 2880);
  std::free(buffer);
  if (bytes.compare(0, 6, "SIMPLE") != 0)
    throw std::runtime_error("cfitsio did not make a primary HDU in memory: " +
                             cfitsio_message(status));
  return bytes;
}

// Opens an AtomicOutput's temporary file for cfitsio, with an empty primary HDU in it.
// cfitsio creates files by fopen on a name it first checks is free (following symlinks on
// the way); this file was already made safely (AtomicOutput) and is opened again through
// the descriptor (reopen_path), so no name in the folder is trusted twice.
fitsfile* open_output(AtomicOutput& out, const std::string& path) {
  const std::string primary = empty_primary_hdu();
  std::size_t done = 0;
  while (done < primary.size()) {
    const ssize_t n =
        ::pwrite(out.fd(), primary.data() + done, primary.size() - done, static_cast<off_t>(done));
    if (n < 0 && errno == EINTR) continue;
    if (n < 0)
      throw WriteError({path, {}, {}}, "writing the primary HDU: " + errno_text(errno));
    done += static_cast<std::size_t>(n);
  }
  int status = 0;
  fitsfile* f = nullptr;
  fits_open_diskfile(&f, literal_name(out.reopen_path()).c_str(), READWRITE, &status);
  if (status) throw_write_status(status, path, "opening the new file");
  return f;
}

// FITS files are whole 2880-byte blocks; a file that is not was cut short: say so.
[[noreturn]] void rethrow_with_size_hint(const InputError& e, const std::string& path) {
  if (std::filesystem::file_size(path) % 2880 == 0) throw e;
  throw InputError(
      e.where(), e.rule(),
      e.detail() + fmt::format(" (the file is {} bytes, not a multiple of 2880: truncated?)",
                               std::filesystem::file_size(path)));
}

}  // namespace

// How a column is decoded from a block of raw rows (FITS Standard 4.0, section 7.3): plain
// big-endian numbers, logicals and characters, without TSCAL/TZERO. Other columns (scaled,
// vector, bit, complex, variable-length) are read by cfitsio column by column.
struct RawColumn {
  char type = 0;            // TFORM letter: D E K J I B L A
  std::size_t offset = 0;   // byte offset in the row
  std::size_t bytes = 0;    // field width
  bool has_tnull = false;   // integer columns: the TNULLn value marks a null
  LONGLONG tnull = 0;
};

struct FitsTableReader::Impl {
  std::unique_ptr<fitsfile, FitsFileCloser> file;
  fitsfile* f = nullptr;
  std::string path;
  LONGLONG rows = 0;
  int columns = 0;
  std::size_t row_bytes = 0;                   // NAXIS1
  std::vector<std::optional<RawColumn>> raw;   // per column; empty: read by cfitsio
  bool raw_layout_known = false;               // every column's width is known
  bool block_reads = true;
};

namespace {

// Bytes per element of a binary-table TFORM letter; 0 when unknown.
std::size_t tform_bytes(char type) {
  switch (type) {
    case 'L': case 'B': case 'A': return 1;
    case 'I': return 2;
    case 'J': case 'E': return 4;
    case 'K': case 'D': case 'C': case 'P': return 8;
    case 'M': case 'Q': return 16;
    default: return 0;
  }
}

// Plans the block decode of every column; a column it cannot decode keeps cfitsio's reader.
// False when the row layout is not fully known (then every column goes through cfitsio).
bool plan_raw_columns(fitsfile* f, int columns, std::size_t& row_bytes,
                      std::vector<std::optional<RawColumn>>& raw) {
  int status = 0;
  LONGLONG naxis1 = 0;
  fits_read_key(f, TLONGLONG, "NAXIS1", &naxis1, nullptr, &status);
  if (status || naxis1 <= 0) return false;
  row_bytes = static_cast<std::size_t>(naxis1);
  std::size_t offset = 0;
  raw.assign(static_cast<std::size_t>(columns), std::nullopt);
  for (int c = 1; c <= columns; ++c) {
    char ttype[FLEN_VALUE] = {0}, tunit[FLEN_VALUE] = {0}, tdisp[FLEN_VALUE] = {0};
    char dtype[FLEN_VALUE] = {0};
    long repeat = 0;
    double scale = 1, zero = 0;
    long nulval = 0;
    fits_get_bcolparms(f, c, ttype, tunit, dtype, &repeat, &scale, &zero, &nulval, tdisp,
                       &status);
    if (status) return false;
    const char type = dtype[0];
    const std::size_t each = tform_bytes(type);
    if (each == 0) return false;
    const std::size_t bytes = (type == 'A' ? 1 : each) * static_cast<std::size_t>(repeat);
    const bool plain = scale == 1.0 && zero == 0.0 &&
                       (type == 'A' ? repeat >= 1 : repeat == 1) &&
                       std::string_view("DEKJIBLA").find(type) != std::string_view::npos;
    if (plain) {
      RawColumn rc{type, offset, bytes, false, 0};
      if (std::string_view("KJIB").find(type) != std::string_view::npos) {
        int key_status = 0;
        LONGLONG tnull = 0;
        fits_read_key(f, TLONGLONG, fmt::format("TNULL{}", c).c_str(), &tnull, nullptr,
                      &key_status);
        if (key_status == 0) rc.has_tnull = true, rc.tnull = tnull;
      }
      raw[static_cast<std::size_t>(c - 1)] = rc;
    }
    offset += bytes;
  }
  return offset == row_bytes;
}

template <typename T>
T get_big_endian(const unsigned char* p) {
  std::uint64_t bits = 0;
  for (std::size_t i = 0; i < sizeof(T); ++i) bits = (bits << 8) | p[i];
  if constexpr (sizeof(T) == 8) {
    return std::bit_cast<T>(bits);
  } else if constexpr (sizeof(T) == 4) {
    return std::bit_cast<T>(static_cast<std::uint32_t>(bits));
  } else if constexpr (sizeof(T) == 2) {
    return std::bit_cast<T>(static_cast<std::uint16_t>(bits));
  } else {
    return static_cast<T>(bits);
  }
}

// One column of n rows decoded from a block of raw rows, as cfitsio's column reads give it:
// text up to its first NUL without trailing blanks (empty: null), NaN and TNULL as null,
// logical 'T'/'F' (0: null).
void decode_raw_column(const RawColumn& rc, const std::string& name, const std::string& unit,
                       const unsigned char* block, std::size_t row_bytes, std::size_t n,
                       StarTable& table) {
  const unsigned char* at = block + rc.offset;
  switch (rc.type) {
    case 'A': {
      Column& col = table.add_column(name, ColumnType::kText, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        const char* p = reinterpret_cast<const char*>(at);
        std::size_t len = 0;
        while (len < rc.bytes && p[len] != '\0') ++len;
        while (len > 0 && p[len - 1] == ' ') --len;
        col.null[r] = len == 0 ? 1 : 0;
        col.text[r].assign(p, len);
      }
      return;
    }
    case 'L': {
      Column& col = table.add_column(name, ColumnType::kBoolean, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        col.boolean[r] = *at == 'T' ? 1 : 0;
        col.null[r] = *at == 0 ? 1 : 0;
      }
      return;
    }
    case 'D':
    case 'E': {
      Column& col = table.add_column(name, ColumnType::kReal, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        // + 0.0 as cfitsio's scaling (v * 1 + 0) does: -0 reads as 0.
        const double v = (rc.type == 'D' ? get_big_endian<double>(at)
                                         : static_cast<double>(get_big_endian<float>(at))) +
                         0.0;
        const bool null = std::isnan(v);
        col.null[r] = null ? 1 : 0;
        col.real[r] = null ? std::numeric_limits<double>::quiet_NaN() : v;
      }
      return;
    }
    default: {
      Column& col = table.add_column(name, ColumnType::kInteger, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        LONGLONG v = 0;
        switch (rc.type) {
          case 'K': v = get_big_endian<std::int64_t>(at); break;
          case 'J': v = get_big_endian<std::int32_t>(at); break;
          case 'I': v = get_big_endian<std::int16_t>(at); break;
          default: v = *at; break;  // 'B': unsigned byte
        }
        const bool null = rc.has_tnull && v == rc.tnull;
        col.null[r] = null ? 1 : 0;
        col.integer[r] = null ? 0 : v;
      }
      return;
    }
  }
}

}  // namespace

FitsTableReader::FitsTableReader(const std::string& path, const FitsHduChoice& hdu)
    : impl_(std::make_unique<Impl>()) {
  // A missing file, a folder, a FIFO (refused without waiting on it) or a symlink loop
  // each have their rule and message.
  check_input_file(path);
  impl_->path = path;
  try {
    check_declared_sizes(path);
    impl_->file.reset(open_literal(path, READONLY));
    impl_->f = impl_->file.get();
    move_to_hdu(impl_->f, path, hdu);
    int status = 0;
    fits_get_num_rowsll(impl_->f, &impl_->rows, &status);
    fits_get_num_cols(impl_->f, &impl_->columns, &status);
    check_status(status, path, "reading the table size");
    impl_->raw_layout_known =
        plan_raw_columns(impl_->f, impl_->columns, impl_->row_bytes, impl_->raw);
  } catch (const InputError& e) {
    rethrow_with_size_hint(e, path);
  }
}

FitsTableReader::~FitsTableReader() = default;

std::int64_t FitsTableReader::rows() const { return impl_->rows; }
void FitsTableReader::use_block_reads(bool on) { impl_->block_reads = on; }

SourceTable FitsTableReader::read(std::int64_t first, std::int64_t count) {
  const LONGLONG begin = std::clamp<LONGLONG>(first, 0, impl_->rows);
  const LONGLONG n =
      count < 0 ? impl_->rows - begin : std::min<LONGLONG>(count, impl_->rows - begin);
  SourceTable out;
  out.file = impl_->path;
  try {
    // Plain columns come from one read of the rows' raw bytes, decoded here; cfitsio's own
    // column reads cross the whole block once per column.
    std::vector<unsigned char> block;
    if (impl_->raw_layout_known && n > 0 && impl_->block_reads) {
      block.resize(static_cast<std::size_t>(n) * impl_->row_bytes);
      int status = 0;
      fits_read_tblbytes(impl_->f, begin + 1, 1, static_cast<LONGLONG>(block.size()),
                         block.data(), &status);
      check_status(status, impl_->path,
                   fmt::format("reading rows {} to {}", begin + 1, begin + n));
    }
    for (int c = 1; c <= impl_->columns; ++c) {
      const auto& rc = impl_->raw.empty() ? std::nullopt : impl_->raw[static_cast<std::size_t>(c - 1)];
      if (block.empty() || !rc) {
        read_column(impl_->f, impl_->path, c, begin + 1, n, out);
        continue;
      }
      int status = 0;
      char ttype[FLEN_VALUE] = {0};
      fits_read_key(impl_->f, TSTRING, fmt::format("TTYPE{}", c).c_str(), ttype, nullptr, &status);
      check_status(status, impl_->path, fmt::format("reading the name of column {}", c));
      decode_raw_column(*rc, ttype, read_string_key(impl_->f, fmt::format("TUNIT{}", c)),
                        block.data(), impl_->row_bytes, static_cast<std::size_t>(n), out.table);
    }
    read_header_keywords(impl_->f, impl_->path, out.table);
  } catch (const InputError& e) {
    rethrow_with_size_hint(e, impl_->path);
  }
  out.source_rows.reserve(static_cast<std::size_t>(n));
  for (LONGLONG r = 1; r <= n; ++r) out.source_rows.push_back(begin + r);
  return out;
}

SourceTable read_fits_table(const std::string& path, const FitsHduChoice& hdu) {
  FitsTableReader reader(path, hdu);
  return reader.read(0, -1);
}

void write_fits_tables(const std::string& path, const std::vector<NamedTable>& tables) {
  AtomicOutput out(path);
  int status = 0;
  fitsfile* raw = open_output(out, path);
  std::unique_ptr<fitsfile, FitsFileCloser> f(raw);
  for (const auto& [name, table] : tables) write_one_table(raw, name, *table, path);
  fits_close_file(f.release(), &status);
  if (status) throw_write_status(status, path, "closing the file");
  out.commit();
}

struct FitsTableStream::Impl {
  AtomicOutput out;
  std::unique_ptr<fitsfile, FitsFileCloser> file;
  std::string extname;
  std::vector<std::size_t> widths;  // bytes per row of each column
  LONGLONG rows = 0;       // rows written
  LONGLONG allocated = 0;  // rows the table has (NAXIS2)
  LONGLONG expected = 0;
  bool table_made = false;
  std::size_t bytes_since_writeback = 0;
  explicit Impl(const std::string& path) : out(path) {}
};

FitsTableStream::FitsTableStream(const std::string& path, std::string extname,
                                 std::int64_t expected_rows)
    : impl_(std::make_unique<Impl>(path)) {
  impl_->extname = std::move(extname);
  impl_->expected = std::max<std::int64_t>(0, expected_rows);
  impl_->file.reset(open_output(impl_->out, path));
}

FitsTableStream::~FitsTableStream() = default;

std::int64_t FitsTableStream::rows() const { return impl_->rows; }

void FitsTableStream::append(const StarTable& rows) {
  Impl& m = *impl_;
  const std::string& path = m.out.destination();
  int status = 0;
  std::vector<std::size_t> need = widest_text(rows);
  if (!m.table_made) {
    m.widths = field_widths(rows, need);
    // Room for the keywords finish() writes: provenance, one per input, and the table's own.
    create_table_hdu(m.file.get(), m.extname, rows, m.widths, m.expected, kStreamHeaderRoom, path);
    m.allocated = m.expected;
    m.table_made = true;
  }
  if (rows.columns() != m.widths.size())
    throw std::logic_error("FitsTableStream: a group with other columns than the first");
  for (std::size_t c = 0; c < rows.columns(); ++c) {
    if (rows.column(c).type != ColumnType::kText || need[c] <= m.widths[c]) continue;
    // A wider value than any before: widen the column (cfitsio moves the rows written).
    fits_modify_vector_len(m.file.get(), static_cast<int>(c) + 1, static_cast<LONGLONG>(need[c]),
                           &status);
    if (status) throw_write_status(status, path, "widening column " + rows.column(c).name);
    m.widths[c] = need[c];
  }
  const auto n = static_cast<LONGLONG>(rows.rows());
  if (n == 0) return;
  // Rows the table was made with first; past them the table grows (cfitsio then writes the
  // new rows twice: once empty, once filled).
  const auto fit = static_cast<std::size_t>(std::min(n, m.allocated - m.rows));
  write_table_rows(m.file.get(), rows, m.widths, m.rows, path, 0, fit);
  if (fit < rows.rows()) {
    fits_insert_rows(m.file.get(), m.allocated, n - static_cast<LONGLONG>(fit), &status);
    if (status) throw_write_status(status, path, "adding rows");
    m.allocated += n - static_cast<LONGLONG>(fit);
    write_table_rows(m.file.get(), rows, m.widths, m.rows + static_cast<LONGLONG>(fit), path, fit,
                     rows.rows());
  }
  m.rows += n;
  // The disk writes what is done while the rest is checked, not all of it in finish()'s
  // fsync: left to the end, that fsync was a quarter of a million-row ingest's time.
  constexpr std::size_t kWritebackBytes = 4u << 20;
  for (std::size_t w : m.widths) m.bytes_since_writeback += w * rows.rows();
  if (m.bytes_since_writeback >= kWritebackBytes) {
    m.out.start_writeback();
    m.bytes_since_writeback = 0;
  }
}

void FitsTableStream::finish(const std::vector<Keyword>& header,
                             const std::vector<NamedTable>& more, const StarTable& empty_schema) {
  Impl& m = *impl_;
  const std::string& path = m.out.destination();
  if (!m.table_made) append(empty_schema);
  int status = 0;
  fits_movabs_hdu(m.file.get(), 2, nullptr, &status);
  if (m.allocated > m.rows) {
    // The rows made but never written exist in neither the file nor cfitsio's buffers, and
    // fits_delete_rows assumes they do: it blanks the bytes freed behind the last kept row
    // after a seek that reports end of file (ffshft, editcol.c), so when the kept rows end
    // exactly on a 2880-byte block it failed with "tried to move past end of file". The
    // unused rows are therefore written (zeros) before they are deleted; they are at most
    // the rows refused, so this costs little.
    std::size_t row_bytes = 0;
    for (std::size_t w : m.widths) row_bytes += w;
    const LONGLONG block = std::max<LONGLONG>(1, (256 << 10) / std::max<std::size_t>(1, row_bytes));
    std::vector<unsigned char> zeros;
    for (LONGLONG r = m.rows; r < m.allocated && status == 0; r += block) {
      const LONGLONG n = std::min(block, m.allocated - r);
      zeros.assign(static_cast<std::size_t>(n) * row_bytes, 0);
      fits_write_tblbytes(m.file.get(), r + 1, 1, static_cast<LONGLONG>(zeros.size()), zeros.data(),
                          &status);
    }
    fits_delete_rows(m.file.get(), m.rows + 1, m.allocated - m.rows, &status);
  }
  if (status) throw_write_status(status, path, "closing table " + m.extname);
  for (const auto& k : header) write_keyword(m.file.get(), k, path);
  for (const auto& [name, table] : more) write_one_table(m.file.get(), name, *table, path);
  fits_close_file(m.file.release(), &status);
  if (status) throw_write_status(status, path, "closing the file");
  m.out.commit();
}

}  // namespace rungcal
