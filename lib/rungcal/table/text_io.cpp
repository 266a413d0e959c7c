// SPDX-License-Identifier: MIT
#include "rungcal/table/text_io.hpp"

#include <algorithm>
#include <cctype>
#include <charconv>
#include <fstream>
#include <set>
#include <sstream>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

std::string trim(std::string_view s) {
  std::size_t b = 0, e = s.size();
  while (b < e && (s[b] == ' ' || s[b] == '\t' || s[b] == '\r')) ++b;
  while (e > b && (s[e - 1] == ' ' || s[e - 1] == '\t' || s[e - 1] == '\r')) --e;
  return std::string(s.substr(b, e - b));
}

bool starts_with(std::string_view s, std::string_view prefix) {
  return !prefix.empty() && s.substr(0, prefix.size()) == prefix;
}

char single_delimiter(Delimiter d) {
  switch (d) {
    case Delimiter::kComma: return ',';
    case Delimiter::kTab: return '\t';
    case Delimiter::kSemicolon: return ';';
    case Delimiter::kPipe: return '|';
    default: return 0;
  }
}

std::vector<std::string> split_runs(std::string_view line, bool need_two_spaces) {
  std::vector<std::string> out;
  std::size_t i = 0, n = line.size();
  while (i < n && (line[i] == ' ' || line[i] == '\t')) ++i;
  std::string cur;
  while (i < n) {
    char c = line[i];
    bool is_gap = c == '\t' || (c == ' ' && (!need_two_spaces || (i + 1 < n && (line[i + 1] == ' ' || line[i + 1] == '\t'))));
    if (is_gap) {
      out.push_back(cur);
      cur.clear();
      while (i < n && (line[i] == ' ' || line[i] == '\t')) ++i;
      continue;
    }
    cur += c;
    ++i;
  }
  if (!cur.empty()) out.push_back(cur);
  return out;
}

// Splits one line; quoted fields (double quotes, "" inside) only for comma files.
std::vector<std::string> split_line(std::string_view line, Delimiter d, const std::string& file,
                                    std::int64_t line_no) {
  if (d == Delimiter::kWhitespace) return split_runs(line, false);
  if (d == Delimiter::kMultiSpace) return split_runs(line, true);
  const char sep = single_delimiter(d);
  std::vector<std::string> out;
  if (d != Delimiter::kComma || line.find('"') == std::string_view::npos) {
    // No quoting on the line (most lines of most tables): cut at each delimiter.
    std::size_t start = 0;
    while (true) {
      const std::size_t end = line.find(sep, start);
      out.push_back(trim(line.substr(start, end == std::string_view::npos ? end : end - start)));
      if (end == std::string_view::npos) return out;
      start = end + 1;
    }
  }
  std::string cur;
  bool quoted = false, was_quoted = false;
  for (std::size_t i = 0; i < line.size(); ++i) {
    char c = line[i];
    if (d == Delimiter::kComma && c == '"') {
      if (quoted && i + 1 < line.size() && line[i + 1] == '"') {
        cur += '"';
        ++i;
      } else {
        quoted = !quoted;
        was_quoted = true;
      }
      continue;
    }
    if (c == sep && !quoted) {
      out.push_back(was_quoted ? cur : trim(cur));
      cur.clear();
      was_quoted = false;
      continue;
    }
    cur += c;
  }
  if (quoted)
    throw InputError({file, line_no, {}, "line"}, "unterminated_quote", "a double quote opens a field that never closes");
  out.push_back(was_quoted ? cur : trim(cur));
  return out;
}

void check_encoding(const std::string& content, const std::string& name) {
  auto has_prefix = [&](std::string_view p) { return content.compare(0, p.size(), p) == 0; };
  if (has_prefix("\xFF\xFE") || has_prefix("\xFE\xFF") || has_prefix(std::string_view("\x00\x00\xFE\xFF", 4)))
    throw InputError({name, 1, {}, "line"}, "encoding",
                     "the file is UTF-16 or UTF-32 encoded; save it as UTF-8 or ASCII");
  auto nul = content.find('\0');
  if (nul != std::string::npos) {
    std::int64_t line = 1 + std::count(content.begin(), content.begin() + static_cast<std::ptrdiff_t>(nul), '\n');
    throw InputError({name, line, {}, "line"}, "encoding",
                     "the file holds NUL bytes: it is not a text table (a FITS file given as text?)");
  }
}

std::string quote_csv(const std::string& s) {
  if (s.find_first_of(",\"\n\r") == std::string::npos && (s.empty() || (s.front() != ' ' && s.back() != ' ')))
    return s;
  std::string out = "\"";
  for (char c : s) {
    if (c == '"') out += '"';
    out += c;
  }
  return out + "\"";
}

}  // namespace

std::string TextReadOptions::check() const {
  if (!has_header && column_names.empty())
    return "column_names: required when the file has no header line (has_header = false)";
  std::set<std::string> seen;
  for (const auto& n : column_names)
    if (!seen.insert(n).second) return fmt::format("column_names: '{}' is named twice", n);
  return "";
}

SourceTable parse_text_table(const std::string& raw, const std::string& name,
                             const TextReadOptions& options) {
  if (std::string err = options.check(); !err.empty())
    throw InputError({name, {}, {}}, "config_value", err);
  check_encoding(raw, name);
  std::string_view content(raw);
  if (content.substr(0, 3) == "\xEF\xBB\xBF") content.remove_prefix(3);  // UTF-8 BOM

  SourceTable out;
  out.file = name;
  out.row_label = "line";
  std::vector<std::string> names = options.column_names;
  bool header_done = !options.has_header;
  std::vector<std::vector<std::string>> rows;

  std::int64_t line_no = 0;
  std::size_t pos = 0;
  while (pos < content.size()) {
    std::size_t end = content.find('\n', pos);
    if (end == std::string_view::npos) end = content.size();
    std::string_view line = content.substr(pos, end - pos);
    pos = end + 1;
    ++line_no;
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    if (static_cast<std::size_t>(line_no) <= options.skip_lines) continue;
    std::string trimmed = trim(line);
    if (trimmed.empty()) continue;

    if (!header_done) {
      bool is_header = options.header_prefix.empty() ? !starts_with(trimmed, options.comment_prefix)
                                                     : starts_with(trimmed, options.header_prefix);
      if (!is_header) continue;  // comment lines before the header
      std::string_view h = trimmed;
      h.remove_prefix(options.header_prefix.size());
      names = split_line(h, options.delimiter, name, line_no);
      std::set<std::string> seen;
      for (auto& n : names) {
        n = trim(n);
        if (n.empty())
          throw InputError({name, line_no, {}, "line"}, "duplicate_column", "the header has an empty column name");
        if (!seen.insert(n).second)
          throw InputError({name, line_no, n, "line"}, "duplicate_column", "the header names this column twice");
      }
      header_done = true;
      continue;
    }
    if (starts_with(trimmed, options.comment_prefix)) continue;
    auto fields = split_line(line, options.delimiter, name, line_no);
    if (fields.size() != names.size()) {
      throw InputError({name, line_no, {}, "line"}, "field_count",
                       fmt::format("{} fields where the header has {} columns", fields.size(), names.size()));
    }
    rows.push_back(std::move(fields));
    out.source_rows.push_back(line_no);
  }
  if (names.empty() || (options.has_header && !header_done))
    throw InputError({name, {}, {}}, "empty_file", "no header line found (the file is empty or all comments)");
  if (rows.empty()) throw InputError({name, {}, {}}, "empty_file", "the table has no data rows");

  for (std::size_t c = 0; c < names.size(); ++c) {
    Column& col = out.table.add_column(names[c], ColumnType::kText);
    col.text.clear();
    col.null.clear();
    col.text.reserve(rows.size());
    for (auto& r : rows) {
      std::string& v = r[c];
      if (!v.empty() && (std::isspace(static_cast<unsigned char>(v.front())) ||
                         std::isspace(static_cast<unsigned char>(v.back()))))
        v = trim(v);  // a quoted field keeps its spaces until here
      bool missing = v.empty() || std::find(options.missing.begin(), options.missing.end(), v) != options.missing.end();
      if (missing) col.push_null();
      else col.push_text(std::move(v));
    }
  }
  return out;
}

SourceTable read_text_table(const std::string& path, const TextReadOptions& options) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError({path, {}, {}}, "unreadable_file", "cannot open the file for reading");
  std::string content;
  in.seekg(0, std::ios::end);
  const std::streamoff size = in.tellg();
  in.seekg(0, std::ios::beg);
  if (size > 0) {
    content.resize(static_cast<std::size_t>(size));
    in.read(content.data(), size);
  } else {  // not seekable (a pipe): read to the end
    std::stringstream ss;
    ss << in.rdbuf();
    content = ss.str();
  }
  if (!in && !in.eof())
    throw InputError({path, {}, {}}, "unreadable_file", "the file could not be read to its end");
  return parse_text_table(content, path, options);
}

bool parse_real(std::string_view text, double& out) {
  const char* b = text.data();
  const char* e = b + text.size();
  if (b != e && *b == '+') ++b;  // from_chars rejects a leading '+', published tables use it
  auto [ptr, ec] = std::from_chars(b, e, out);
  return ec == std::errc() && ptr == e;
}

std::string format_csv_table(const StarTable& table) {
  std::string out;
  for (const auto& k : table.header()) {
    std::string v = std::visit([](const auto& x) { return fmt::format("{}", x); }, k.value);
    out += fmt::format("# {} = {}\n", k.key, v);
  }
  for (std::size_t c = 0; c < table.columns(); ++c) {
    if (c) out += ',';
    out += quote_csv(table.column(c).name);
  }
  out += '\n';
  for (std::size_t r = 0; r < table.rows(); ++r) {
    for (std::size_t c = 0; c < table.columns(); ++c) {
      if (c) out += ',';
      const Column& col = table.column(c);
      if (col.type == ColumnType::kReal && !col.is_null(r)) out += fmt::format("{}", col.real[r]);  // shortest round-trip form
      else out += quote_csv(col.to_string(r));
    }
    out += '\n';
  }
  return out;
}

void write_csv_table(const StarTable& table, const std::string& path) {
  write_file_atomically(path, format_csv_table(table));
}

}  // namespace rungcal
