// SPDX-License-Identifier: MIT
// VOTable reader: the XML, the FIELDs and TABLEDATA; the rows of a BINARY or BINARY2
// STREAM are read by votable_binary.cpp. Format: IVOA Recommendation "VOTable Format
// Definition", version 1.4 (2019), sections 4 (FIELD), 5 (VALUES, the binary
// serializations) and 6 (TABLEDATA).
#include "rungcal/table/votable_io.hpp"

#include <expat.h>

#include <algorithm>
#include <charconv>
#include <fstream>
#include <iterator>
#include <limits>
#include <memory>
#include <optional>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/base64.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/table/text_io.hpp"
#include "rungcal/table/votable_parts.hpp"

namespace rungcal {
namespace {

using Field = VotableField;

// An element name without its namespace prefix ("vot:TD" -> "TD").
std::string_view local(const XML_Char* name) {
  std::string_view n(name);
  const auto colon = n.rfind(':');
  return colon == std::string_view::npos ? n : n.substr(colon + 1);
}

const XML_Char* attribute(const XML_Char** atts, std::string_view key) {
  for (int i = 0; atts[i]; i += 2)
    if (key == atts[i]) return atts[i + 1];
  return nullptr;
}

// The parse state, shared with expat's callbacks.
struct Reader {
  std::string file;
  XML_Parser parser = nullptr;
  std::vector<Field> fields;
  int tables = 0;         // TABLE elements started
  bool in_table = false;  // inside the first TABLE
  bool in_field = false;
  bool in_td = false;
  bool data_seen = false;               // TABLEDATA, BINARY or BINARY2 found
  std::optional<VotableStream> binary;  // the serialization, when binary
  bool in_stream = false;
  bool stream_seen = false;
  std::int64_t stream_line = 0;     // the line of the STREAM's start tag
  bool written_by_astropy = false;  // an XML comment names astropy.io.votable
  std::int64_t tr_line = 0;
  std::vector<std::string> row;
  std::vector<std::uint8_t> row_empty;  // a TD without text (or an empty <TD/>)
  std::string text;
  SourceTable out;
  std::vector<std::string> wanted_arrays;
  std::vector<Column*> columns;  // per field; nullptr when not usable
  std::exception_ptr error;      // thrown by a callback, rethrown after the parse

  std::int64_t line() const { return static_cast<std::int64_t>(XML_GetCurrentLineNumber(parser)); }

  [[noreturn]] void fail(const std::string& rule, const std::string& column,
                         const std::string& message) const {
    throw InputError({file, line(), column, "line"}, rule, message);
  }

  void start(std::string_view el, const XML_Char** atts) {
    if (in_stream)
      fail("votable_table", "",
           fmt::format("an element <{}> inside the STREAM, which holds base64 text only", el));
    if (el == "TABLE") {
      in_table = ++tables == 1;
      return;
    }
    if (!in_table) return;
    // The columns are laid out when the data start: a FIELD after that (VOTable puts them
    // before DATA) would have no column.
    if (el == "FIELD" && data_seen)
      fail("votable_table", "", "a FIELD after the table's data began (FIELDs come before DATA)");
    if (el == "FIELD") {
      Field f;
      const XML_Char* name = attribute(atts, "name");
      if (!name) name = attribute(atts, "ID");
      if (!name) fail("votable_table", "", "a FIELD has neither a name nor an ID");
      f.name = name;
      if (const XML_Char* v = attribute(atts, "datatype")) f.datatype = v;
      if (const XML_Char* v = attribute(atts, "unit")) f.unit = v;
      if (const XML_Char* v = attribute(atts, "arraysize")) f.arraysize = v;
      fields.push_back(std::move(f));
      in_field = true;
    } else if (el == "VALUES" && in_field) {
      if (const XML_Char* v = attribute(atts, "null")) fields.back().null_value = v;
    } else if (el == "FITS") {
      fail("votable_table", "",
           "the table is serialized as FITS inside the VOTable; rungcal reads TABLEDATA, BINARY "
           "and BINARY2 (ask the archive for one of them, or convert with astropy: "
           "votable.writeto(..., tabledata_format='binary2'))");
    } else if ((el == "BINARY" || el == "BINARY2") && !data_seen) {
      binary = el == "BINARY" ? VotableStream::kBinary : VotableStream::kBinary2;
      refuse_unpacked_bit_arrays();
      open_columns();
      out.row_label = "row";
    } else if (el == "STREAM" && binary && !stream_seen) {
      open_stream(atts);
    } else if (el == "TABLEDATA" && !data_seen) {
      open_columns();
    } else if (el == "TR" && data_seen && !binary) {
      tr_line = line();
      row.clear();
      row_empty.clear();
    } else if (el == "TD" && data_seen && !binary) {
      in_td = true;
      text.clear();
    }
  }

  void end(std::string_view el) {
    if (el == "TABLE") {
      in_table = false;
      return;
    }
    if (!in_table) return;
    if (el == "FIELD") {
      in_field = false;
    } else if (el == "TD" && in_td) {
      in_td = false;
      row_empty.push_back(text.empty() ? 1 : 0);
      row.push_back(std::move(text));
      text.clear();
    } else if (el == "TR" && data_seen && !binary) {
      add_row();
    } else if (el == "STREAM" && in_stream) {
      close_stream();
    }
  }

  // A variable-length bit array is packed, eight elements to a byte (VOTable 1.4, section
  // 5.3; memory), but astropy.io.votable (5.2, Debian 12) writes one byte per element. The
  // stream does not say which, and reading one as the other shifts every later value, so a
  // file that names astropy as its writer and has such a FIELD stops here.
  void refuse_unpacked_bit_arrays() const {
    if (!written_by_astropy) return;
    for (const auto& f : fields)
      if (f.datatype == "bit" && !f.arraysize.empty() && f.arraysize.back() == '*')
        fail("votable_table", f.name,
             "a variable-length bit array in a binary stream written by astropy.io.votable, "
             "which writes one byte per element where VOTable packs eight: rungcal cannot tell "
             "which the file holds (write the column as datatype boolean, or in TABLEDATA)");
  }

  // VOTable 1.4, section 5.1: a STREAM holds the data itself, base64-encoded, or points to
  // them with href. rungcal reads the first kind only.
  void open_stream(const XML_Char** atts) {
    stream_seen = true;
    if (const XML_Char* href = attribute(atts, "href"))
      fail("votable_table", "",
           fmt::format("the table's STREAM points to data outside the file ({}); rungcal reads a "
                       "STREAM whose data are inside it (download the data, or ask the archive for "
                       "TABLEDATA or an inline BINARY2 stream)",
                       href));
    const XML_Char* encoding = attribute(atts, "encoding");
    if (!encoding || std::string_view(encoding) != "base64")
      fail("votable_table", "",
           fmt::format("the table's STREAM has encoding '{}'; rungcal reads encoding=\"base64\"",
                       encoding ? encoding : "(none)"));
    in_stream = true;
    stream_line = line();
    text.clear();
  }

  void close_stream() {
    in_stream = false;
    const Base64Decoded decoded = decode_base64(text);
    if (!decoded.ok()) {
      const auto before = std::string_view(text).substr(0, *decoded.bad_offset);
      const auto line_of_error = stream_line + std::count(before.begin(), before.end(), '\n');
      throw InputError({file, line_of_error, {}, "line"}, "votable_base64",
                       fmt::format("the STREAM is not base64: {}", decoded.problem));
    }
    text.clear();
    read_votable_binary_rows(decoded.bytes, *binary, fields, columns, file, out);
  }

  void open_columns() {
    if (fields.empty()) fail("votable_table", "", "the TABLE has no FIELD before its data");
    data_seen = true;
    out.file = file;
    out.row_label = "line";
    for (auto& f : fields) {
      const std::string& t = f.datatype;
      const bool is_char = t == "char" || t == "unicodeChar";
      if (is_char) {
        f.type = ColumnType::kText;
      } else if (t == "boolean" || t == "bit") {
        f.type = ColumnType::kBoolean;
      } else if (t == "unsignedByte" || t == "short" || t == "int" || t == "long") {
        f.type = ColumnType::kInteger;
      } else if (t == "float" || t == "double") {
        f.type = ColumnType::kReal;
      } else {
        f.usable = false;
        out.unusable_columns[f.name] = fmt::format("datatype '{}' is not read by rungcal", t);
      }
      if (!is_char && !f.arraysize.empty() && f.arraysize != "1") {
        f.usable = false;
        const bool wanted =
            std::find(wanted_arrays.begin(), wanted_arrays.end(), f.name) != wanted_arrays.end();
        if (wanted && f.type != ColumnType::kText && !out.arrays.count(f.name)) {
          f.array = &out.arrays[f.name];
          f.array->unit = f.unit;
          f.array->logical = f.type == ColumnType::kBoolean;
        } else if (!out.arrays.count(f.name)) {
          out.unusable_columns[f.name] = fmt::format(
              "an array column (arraysize {}): rungcal reads one value per star", f.arraysize);
        }
      }
      if (f.usable && out.table.has(f.name))
        fail("duplicate_column", f.name, "two FIELDs have this name");
      columns.push_back(f.usable ? &out.table.add_column(f.name, f.type, f.unit) : nullptr);
    }
  }

  void add_row() {
    if (row.size() != fields.size())
      throw InputError(
          {file, tr_line, {}, "line"}, "field_count",
          fmt::format("a TR with {} TD where the TABLE has {} FIELDs", row.size(), fields.size()));
    for (std::size_t c = 0; c < fields.size(); ++c) {
      if (fields[c].array) {
        fields[c].array->rows.push_back(row_empty[c] ? std::vector<double>{}
                                                     : array_values(fields[c], row[c]));
        continue;
      }
      if (!columns[c]) continue;
      Column& col = *columns[c];
      const Field& f = fields[c];
      std::string_view v = row[c];
      if (col.type != ColumnType::kText) {  // numbers and logicals: spaces around do not count
        const auto b = v.find_first_not_of(" \t\r\n");
        v = b == std::string_view::npos ? std::string_view()
                                        : v.substr(b, v.find_last_not_of(" \t\r\n") - b + 1);
      }
      if (row_empty[c] || v.empty() || (f.null_value && v == *f.null_value)) {
        col.push_null();
        continue;
      }
      auto lie = [&] {
        throw InputError(
            {file, tr_line, f.name, "line"}, "votable_value",
            fmt::format("'{}' is not a {} value, which the FIELD says the column holds", v,
                        f.datatype));
      };
      switch (col.type) {
        case ColumnType::kText:
          col.push_text(std::string(v));
          break;
        case ColumnType::kReal: {
          double x = 0;
          if (!parse_real(v, x)) lie();
          col.push_real(x);
          break;
        }
        case ColumnType::kInteger: {
          std::int64_t x = 0;
          const char* b = v.data() + (v[0] == '+' ? 1 : 0);
          auto [end, ec] = std::from_chars(b, v.data() + v.size(), x);
          if (ec != std::errc() || end != v.data() + v.size()) lie();
          col.push_integer(x);
          break;
        }
        case ColumnType::kBoolean:
          if (v == "T" || v == "t" || v == "true" || v == "TRUE" || v == "1")
            col.push_boolean(true);
          else if (v == "F" || v == "f" || v == "false" || v == "FALSE" || v == "0")
            col.push_boolean(false);
          else if (v == "?")
            col.push_null();
          else
            lie();
          break;
      }
    }
    out.source_rows.push_back(tr_line);
  }

  // An array TD's elements, separated by whitespace (VOTable 1.4, section 6.1).
  std::vector<double> array_values(const Field& f, std::string_view cell) const {
    std::vector<double> v;
    std::size_t i = 0;
    while (i < cell.size()) {
      const auto b = cell.find_first_not_of(" \t\r\n", i);
      if (b == std::string_view::npos) break;
      auto e = cell.find_first_of(" \t\r\n", b);
      if (e == std::string_view::npos) e = cell.size();
      const std::string_view x = cell.substr(b, e - b);
      i = e;
      // A bit array may be written without separators ("1001"; VOTable 1.4, section 2.1).
      if (f.datatype == "bit" && x.size() > 1 &&
          x.find_first_not_of("01") == std::string_view::npos) {
        for (char ch : x) v.push_back(ch == '1' ? 1.0 : 0.0);
        continue;
      }
      double value = 0;
      if ((f.null_value && x == *f.null_value) || x == "?" || x == "NaN") {
        value = std::numeric_limits<double>::quiet_NaN();
      } else if (f.type == ColumnType::kBoolean) {
        if (x == "T" || x == "t" || x == "true" || x == "TRUE" || x == "1")
          value = 1;
        else if (x == "F" || x == "f" || x == "false" || x == "FALSE" || x == "0")
          value = 0;
        else
          bad_element(f, x);
      } else if (!parse_real(x, value)) {
        bad_element(f, x);
      }
      v.push_back(value);
    }
    return v;
  }

  [[noreturn]] void bad_element(const Field& f, std::string_view x) const {
    throw InputError(
        {file, tr_line, f.name, "line"}, "votable_value",
        fmt::format("array element '{}' is not a {} value, which the FIELD says the column holds",
                    x, f.datatype));
  }
};

}  // namespace

bool has_votable_extension(const std::string& path) {
  std::string p = path;
  std::transform(p.begin(), p.end(), p.begin(),
                 [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  for (std::string e : {".vot", ".xml", ".votable"})
    if (p.size() >= e.size() && p.compare(p.size() - e.size(), e.size(), e) == 0) return true;
  return false;
}

SourceTable read_votable_table(const std::string& path, const std::vector<std::string>& arrays) {
  return parse_votable_table(read_input_file(path), path, arrays);
}

SourceTable parse_votable_table(const std::string& content, const std::string& name,
                                const std::vector<std::string>& arrays) {
  Reader r;
  r.file = name;
  r.wanted_arrays = arrays;
  std::unique_ptr<std::remove_pointer_t<XML_Parser>, decltype(&XML_ParserFree)> parser(
      XML_ParserCreate(nullptr), &XML_ParserFree);
  if (!parser) throw std::bad_alloc();
  r.parser = parser.get();
  XML_SetUserData(r.parser, &r);
  XML_SetElementHandler(
      r.parser,
      [](void* data, const XML_Char* el, const XML_Char** atts) {
        auto* self = static_cast<Reader*>(data);
        try {
          self->start(local(el), atts);
        } catch (...) {
          self->error = std::current_exception();
          XML_StopParser(self->parser, XML_FALSE);
        }
      },
      [](void* data, const XML_Char* el) {
        auto* self = static_cast<Reader*>(data);
        try {
          self->end(local(el));
        } catch (...) {
          self->error = std::current_exception();
          XML_StopParser(self->parser, XML_FALSE);
        }
      });
  XML_SetCharacterDataHandler(r.parser, [](void* data, const XML_Char* s, int len) {
    auto* self = static_cast<Reader*>(data);
    if (self->in_td || self->in_stream) self->text.append(s, static_cast<std::size_t>(len));
  });
  XML_SetCommentHandler(r.parser, [](void* data, const XML_Char* comment) {
    auto* self = static_cast<Reader*>(data);
    if (std::string_view(comment).find("astropy.io.votable") != std::string_view::npos)
      self->written_by_astropy = true;
  });
  // Fed in pieces: XML_Parse takes an int length.
  constexpr std::size_t kPiece = 1 << 20;
  std::size_t pos = 0;
  do {
    const std::size_t n = std::min(kPiece, content.size() - pos);
    const bool last = pos + n == content.size();
    const auto status = XML_Parse(r.parser, content.data() + pos, static_cast<int>(n), last);
    if (r.error) std::rethrow_exception(r.error);
    if (status == XML_STATUS_ERROR)
      throw InputError(
          {name, r.line(), {}, "line"}, "votable_xml",
          fmt::format("the XML does not parse: {}", XML_ErrorString(XML_GetErrorCode(r.parser))));
    pos += n;
  } while (pos < content.size());
  if (r.tables == 0) throw InputError({name, {}, {}}, "votable_table", "the file has no TABLE");
  if (!r.data_seen)
    throw InputError({name, {}, {}}, "votable_table",
                     "the first TABLE has no TABLEDATA, BINARY or BINARY2");
  if (r.binary && !r.stream_seen)
    throw InputError({name, {}, {}}, "votable_table", "the table's BINARY data have no STREAM");
  return std::move(r.out);
}

}  // namespace rungcal
