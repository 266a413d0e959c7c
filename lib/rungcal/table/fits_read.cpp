// SPDX-License-Identifier: MIT
#include "rungcal/table/fits_io.hpp"

#include <algorithm>
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
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/table/fits_parts.hpp"

namespace rungcal {
namespace fits_parts {

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

std::string literal_name(const std::string& path) {
  return !path.empty() && path[0] == '~' ? "./" + path : path;
}

}  // namespace fits_parts

using namespace fits_parts;

namespace {

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

// Rows first .. first + nrows - 1 (1-based) of a vector or variable-length column (typecode
// negative) into out.arrays: each row's elements through cfitsio, which applies TSCAL/TZERO
// and gives TNULL and the logical null byte as nulls (NaN here).
void read_array_column(fitsfile* f, const std::string& path, int colnum, const std::string& name,
                       const std::string& unit, int typecode, LONGLONG repeat, LONGLONG first,
                       LONGLONG nrows, SourceTable& out) {
  ArrayColumn& a = out.arrays[name];
  a.unit = unit;
  a.logical = std::abs(typecode) == TLOGICAL;
  // A corrupt descriptor cannot make a row longer than the file (no allocation beyond it).
  const auto file_bytes = static_cast<LONGLONG>(std::filesystem::file_size(path));
  for (LONGLONG r = first; r < first + nrows; ++r) {
    int status = 0, anynul = 0;
    LONGLONG n = repeat, heap_offset = 0;
    if (typecode < 0) {
      fits_read_descriptll(f, colnum, r, &n, &heap_offset, &status);
      check_status(status, path, fmt::format("reading row {}'s array descriptor", r), name);
    }
    if (n < 0 || n > file_bytes)
      throw InputError({path, r, name}, "fits_read",
                       fmt::format("the row's array claims {} elements: corrupt descriptor", n));
    const auto size = static_cast<std::size_t>(n);
    std::vector<double> v(size, 0.0);
    std::vector<char> nulls(size, 0);
    if (size > 0 && a.logical) {
      std::vector<char> b(size, 0);
      fits_read_colnull_log(f, colnum, r, 1, n, b.data(), nulls.data(), &anynul, &status);
      for (std::size_t k = 0; k < size; ++k) v[k] = b[k] ? 1.0 : 0.0;
    } else if (size > 0) {
      fits_read_colnull_dbl(f, colnum, r, 1, n, v.data(), nulls.data(), &anynul, &status);
    }
    check_status(status, path, fmt::format("reading row {}", r), name);
    for (std::size_t k = 0; k < size; ++k)
      if (nulls[k]) v[k] = std::numeric_limits<double>::quiet_NaN();
    a.rows.push_back(std::move(v));
  }
}

// Reads rows first .. first + nrows - 1 (1-based) of one column; a vector or variable-length
// column named in `arrays` into out.arrays.
void read_column(fitsfile* f, const std::string& path, int colnum, LONGLONG first, LONGLONG nrows,
                 const std::vector<std::string>& arrays, SourceTable& out) {
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

  const bool is_array = typecode < 0 || (typecode != TSTRING && repeat != 1);
  if (is_array && std::abs(typecode) != TSTRING && !out.arrays.count(name) &&
      std::find(arrays.begin(), arrays.end(), name) != arrays.end()) {
    read_array_column(f, path, colnum, name, unit, typecode, repeat, first, nrows, out);
    return;
  }
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

// FITS files are whole 2880-byte blocks; a file that is not was cut short: say so.
[[noreturn]] void rethrow_with_size_hint(const InputError& e, const std::string& path) {
  if (std::filesystem::file_size(path) % 2880 == 0) throw e;
  throw InputError(
      e.where(), e.rule(),
      e.detail() + fmt::format(" (the file is {} bytes, not a multiple of 2880: truncated?)",
                               std::filesystem::file_size(path)));
}

}  // namespace

struct FitsTableReader::Impl {
  std::unique_ptr<fitsfile, FitsFileCloser> file;
  fitsfile* f = nullptr;
  std::string path;
  LONGLONG rows = 0;
  int columns = 0;
  std::size_t row_bytes = 0;                  // NAXIS1
  std::vector<std::optional<RawColumn>> raw;  // per column; empty: read by cfitsio
  bool raw_layout_known = false;              // every column's width is known
  bool block_reads = true;
  std::vector<std::string> arrays;  // array columns to read
};

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
void FitsTableReader::read_arrays(std::vector<std::string> names) {
  impl_->arrays = std::move(names);
}

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
      fits_read_tblbytes(impl_->f, begin + 1, 1, static_cast<LONGLONG>(block.size()), block.data(),
                         &status);
      check_status(status, impl_->path, fmt::format("reading rows {} to {}", begin + 1, begin + n));
    }
    for (int c = 1; c <= impl_->columns; ++c) {
      const auto& rc =
          impl_->raw.empty() ? std::nullopt : impl_->raw[static_cast<std::size_t>(c - 1)];
      if (block.empty() || !rc) {
        read_column(impl_->f, impl_->path, c, begin + 1, n, impl_->arrays, out);
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

SourceTable read_fits_table(const std::string& path, const FitsHduChoice& hdu,
                            const std::vector<std::string>& arrays) {
  FitsTableReader reader(path, hdu);
  reader.read_arrays(arrays);
  return reader.read(0, -1);
}

}  // namespace rungcal
