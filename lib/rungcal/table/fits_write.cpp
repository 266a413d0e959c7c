// SPDX-License-Identifier: MIT
#include "rungcal/table/fits_io.hpp"

#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <memory>
#include <stdexcept>
#include <type_traits>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/table/fits_parts.hpp"

namespace rungcal {
using namespace fits_parts;
namespace {

constexpr std::int64_t kIntegerNull = std::numeric_limits<std::int64_t>::min();

// The TFORM of a column whose text values (if any) are `width` bytes wide.
std::string tform_for(const Column& c, std::size_t width) {
  switch (c.type) {
    case ColumnType::kReal:
      return "1D";
    case ColumnType::kInteger:
      return "1K";
    case ColumnType::kBoolean:
      return "1L";
    case ColumnType::kText:
      return fmt::format("{}A", width);
  }
  return "1D";
}

// Bytes per row of a column whose text values (if any) are `width` bytes wide.
std::size_t field_width(const Column& c, std::size_t width) {
  switch (c.type) {
    case ColumnType::kReal:
    case ColumnType::kInteger:
      return 8;
    case ColumnType::kBoolean:
      return 1;
    case ColumnType::kText:
      return width;
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
std::vector<std::size_t> field_widths(const StarTable& t,
                                      const std::vector<std::size_t>& text_widths) {
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
        if (!null[i])                   // a fixed-width field, NUL-padded, not NUL-terminated
          std::memcpy(at, v[i].data(),  // NOLINT(bugprone-not-null-terminated-result)
                      std::min(v[i].size(), width));
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
    if (n < 0) throw WriteError({path, {}, {}}, "writing the primary HDU: " + errno_text(errno));
    done += static_cast<std::size_t>(n);
  }
  int status = 0;
  fitsfile* f = nullptr;
  fits_open_diskfile(&f, literal_name(out.reopen_path()).c_str(), READWRITE, &status);
  if (status) throw_write_status(status, path, "opening the new file");
  return f;
}

}  // namespace

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
  LONGLONG rows = 0;                // rows written
  LONGLONG allocated = 0;           // rows the table has (NAXIS2)
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
