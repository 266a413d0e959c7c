// SPDX-License-Identifier: MIT
#include "rungcal/table/text_io.hpp"

#include <algorithm>
#include <cctype>
#include <charconv>
#include <fstream>
#include <memory>
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
    case Delimiter::kComma:
      return ',';
    case Delimiter::kTab:
      return '\t';
    case Delimiter::kSemicolon:
      return ';';
    case Delimiter::kPipe:
      return '|';
    default:
      return 0;
  }
}

std::vector<std::string> split_runs(std::string_view line, bool need_two_spaces) {
  std::vector<std::string> out;
  std::size_t i = 0, n = line.size();
  while (i < n && (line[i] == ' ' || line[i] == '\t')) ++i;
  std::string cur;
  while (i < n) {
    char c = line[i];
    bool is_gap =
        c == '\t' || (c == ' ' && (!need_two_spaces ||
                                   (i + 1 < n && (line[i + 1] == ' ' || line[i + 1] == '\t'))));
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
    throw InputError({file, line_no, {}, "line"}, "unterminated_quote",
                     "a double quote opens a field that never closes");
  out.push_back(was_quoted ? cur : trim(cur));
  return out;
}

void check_encoding(const std::string& content, const std::string& name) {
  auto has_prefix = [&](std::string_view p) { return content.compare(0, p.size(), p) == 0; };
  if (has_prefix("\xFF\xFE") || has_prefix("\xFE\xFF") ||
      has_prefix(std::string_view("\x00\x00\xFE\xFF", 4)))
    throw InputError({name, 1, {}, "line"}, "encoding",
                     "the file is UTF-16 or UTF-32 encoded; save it as UTF-8 or ASCII");
  auto nul = content.find('\0');
  if (nul != std::string::npos) {
    std::int64_t line =
        1 + std::count(content.begin(), content.begin() + static_cast<std::ptrdiff_t>(nul), '\n');
    throw InputError(
        {name, line, {}, "line"}, "encoding",
        "the file holds NUL bytes: it is not a text table (a FITS file given as text?)");
  }
}

std::string quote_csv(const std::string& s) {
  if (s.find_first_of(",\"\n\r") == std::string::npos &&
      (s.empty() || (s.front() != ' ' && s.back() != ' ')))
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
  if (max_field_bytes < 1) return "max_field_bytes: must be at least 1";
  if (!has_header && column_names.empty())
    return "column_names: required when the file has no header line (has_header = false)";
  std::set<std::string> seen;
  for (const auto& n : column_names)
    if (!seen.insert(n).second) return fmt::format("column_names: '{}' is named twice", n);
  return "";
}

namespace {

// The line-by-line rules of a text table, shared by the whole-file and the group reader:
// lines skipped, comments, the header, and each data line's fields.
class TextLineRules {
 public:
  TextLineRules(const TextReadOptions& options, std::string name)
      : options_(options),
        name_(std::move(name)),
        names_(options.column_names),
        header_done_(!options.has_header) {
    if (std::string err = options.check(); !err.empty())
      throw InputError({name_, {}, {}}, "config_value", err);
  }
  bool header_done() const { return header_done_; }
  const std::vector<std::string>& names() const { return names_; }

  // Takes one line (without its newline); a data line's fields go to rows.
  void take(std::string_view line, std::int64_t line_no,
            std::vector<std::vector<std::string>>& rows, std::vector<std::int64_t>& source_rows) {
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    if (static_cast<std::size_t>(line_no) <= options_.skip_lines) return;
    std::string trimmed = trim(line);
    if (trimmed.empty()) return;
    if (!header_done_) {
      take_header(trimmed, line_no);
      return;
    }
    if (starts_with(trimmed, options_.comment_prefix)) return;
    auto fields = split_line(line, options_.delimiter, name_, line_no);
    if (fields.size() != names_.size())
      throw InputError(
          {name_, line_no, {}, "line"}, "field_count",
          fmt::format("{} fields where the header has {} columns", fields.size(), names_.size()));
    for (std::size_t c = 0; c < fields.size(); ++c)
      if (fields[c].size() > options_.max_field_bytes)
        throw InputError({name_, line_no, names_[c], "line"}, "field_too_long",
                         fmt::format("a field of {} bytes; the limit is {} ([source] "
                                     "max_field_bytes)",
                                     fields[c].size(), options_.max_field_bytes));
    rows.push_back(std::move(fields));
    source_rows.push_back(line_no);
  }

  // Throws when the lines seen hold no header.
  void require_header() const {
    if (names_.empty() || !header_done_)
      throw InputError({name_, {}, {}}, "empty_file",
                       "no header line found (the file is empty or all comments)");
  }

 private:
  void take_header(const std::string& trimmed, std::int64_t line_no) {
    const bool is_header = options_.header_prefix.empty()
                               ? !starts_with(trimmed, options_.comment_prefix)
                               : starts_with(trimmed, options_.header_prefix);
    if (!is_header) return;  // comment lines before the header
    std::string_view h = trimmed;
    h.remove_prefix(options_.header_prefix.size());
    names_ = split_line(h, options_.delimiter, name_, line_no);
    std::set<std::string> seen;
    for (auto& n : names_) {
      n = trim(n);
      if (n.empty())
        throw InputError({name_, line_no, {}, "line"}, "duplicate_column",
                         "the header has an empty column name");
      if (!seen.insert(n).second)
        throw InputError({name_, line_no, n, "line"}, "duplicate_column",
                         "the header names this column twice");
    }
    header_done_ = true;
  }

  const TextReadOptions& options_;
  std::string name_;
  std::vector<std::string> names_;
  bool header_done_;
};

// Rows of fields as a table of text columns; missing markers become nulls.
SourceTable text_source_table(const std::string& name, const std::vector<std::string>& names,
                              std::vector<std::vector<std::string>>& rows,
                              std::vector<std::int64_t> source_rows,
                              const TextReadOptions& options) {
  SourceTable out;
  out.file = name;
  out.row_label = "line";
  out.source_rows = std::move(source_rows);
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
      bool missing = v.empty() || std::find(options.missing.begin(), options.missing.end(), v) !=
                                      options.missing.end();
      if (missing)
        col.push_null();
      else
        col.push_text(std::move(v));
    }
  }
  return out;
}

}  // namespace

SourceTable parse_text_table(const std::string& raw, const std::string& name,
                             const TextReadOptions& options) {
  TextLineRules rules(options, name);
  check_encoding(raw, name);
  std::string_view content(raw);
  if (content.substr(0, 3) == "\xEF\xBB\xBF") content.remove_prefix(3);  // UTF-8 BOM
  std::vector<std::vector<std::string>> rows;
  std::vector<std::int64_t> source_rows;
  std::int64_t line_no = 0;
  std::size_t pos = 0;
  while (pos < content.size()) {
    std::size_t end = content.find('\n', pos);
    if (end == std::string_view::npos) end = content.size();
    rules.take(content.substr(pos, end - pos), ++line_no, rows, source_rows);
    pos = end + 1;
  }
  rules.require_header();
  if (rows.empty()) throw InputError({name, {}, {}}, "empty_file", "the table has no data rows");
  return text_source_table(name, rules.names(), rows, std::move(source_rows), options);
}

struct TextTableReader::Impl {
  Impl(const std::string& path, const TextReadOptions& o)
      : options(o), path_(path), rules(options, path), in(path, std::ios::binary) {}
  TextReadOptions options;
  std::string path_;
  TextLineRules rules;  // holds a reference to options
  std::ifstream in;
  std::string buffer;   // bytes read and not yet taken as lines
  std::size_t pos = 0;  // where the next line starts in buffer
  std::int64_t line_no = 0;
  std::uint64_t bytes_taken = 0;
  bool at_end = false;  // the file is read to its end
  bool first_block = true;

  // The next line without its newline; false at the end of the file.
  bool next_line(std::string_view& line) {
    while (true) {
      const std::size_t end = buffer.find('\n', pos);
      if (end != std::string::npos) {
        line = std::string_view(buffer).substr(pos, end - pos);
        bytes_taken += end + 1 - pos;
        pos = end + 1;
        ++line_no;
        return true;
      }
      if (at_end) {
        if (pos >= buffer.size()) return false;
        line = std::string_view(buffer).substr(pos);  // no final newline
        bytes_taken += buffer.size() - pos;
        pos = buffer.size();
        ++line_no;
        return true;
      }
      read_block();
    }
  }

  void read_block() {
    constexpr std::size_t kBlock = 1u << 20;
    buffer.erase(0, pos);
    pos = 0;
    const std::size_t kept = buffer.size();
    buffer.resize(kept + kBlock);
    in.read(buffer.data() + kept, static_cast<std::streamsize>(kBlock));
    const auto got = static_cast<std::size_t>(in.gcount());
    buffer.resize(kept + got);
    if (!in) {
      if (!in.eof())
        throw InputError({path_, {}, {}}, "unreadable_file",
                         "the file could not be read to its end");
      at_end = true;
    }
    check_block(kept);
  }

  // The encoding rules of check_encoding, for the bytes just read.
  void check_block(std::size_t from) {
    std::string_view fresh = std::string_view(buffer).substr(from);
    if (first_block) {
      first_block = false;
      check_encoding(std::string(fresh.substr(0, 4)), path_);
      if (fresh.substr(0, 3) == "\xEF\xBB\xBF") {  // UTF-8 BOM
        buffer.erase(from, 3);
        bytes_taken += 3;
        fresh = std::string_view(buffer).substr(from);
      }
    }
    const std::size_t nul = fresh.find('\0');
    if (nul == std::string_view::npos) return;
    const std::string_view before = std::string_view(buffer).substr(pos, from + nul - pos);
    const std::int64_t line = line_no + 1 + std::count(before.begin(), before.end(), '\n');
    throw InputError(
        {path_, line, {}, "line"}, "encoding",
        "the file holds NUL bytes: it is not a text table (a FITS file given as text?)");
  }
};

TextTableReader::TextTableReader(const std::string& path, const TextReadOptions& options)
    : impl_((check_input_file(path), std::make_unique<Impl>(path, options))) {
  Impl& m = *impl_;
  if (!m.in)
    throw InputError({path, {}, {}}, "unreadable_file", "cannot open the file for reading");
  m.in.seekg(0, std::ios::end);
  const std::streamoff size = m.in.tellg();
  m.in.seekg(0, std::ios::beg);
  file_bytes_ = size > 0 ? static_cast<std::uint64_t>(size) : 0;
  // Up to the header: the data lines come in groups.
  std::vector<std::vector<std::string>> none;
  std::vector<std::int64_t> no_rows;
  std::string_view line;
  while (!m.rules.header_done() && m.next_line(line)) m.rules.take(line, m.line_no, none, no_rows);
  m.rules.require_header();
}

TextTableReader::~TextTableReader() = default;

SourceTable TextTableReader::read(std::size_t max_rows) {
  Impl& m = *impl_;
  std::vector<std::vector<std::string>> rows;
  std::vector<std::int64_t> source_rows;
  std::string_view line;
  while (rows.size() < max_rows && m.next_line(line))
    m.rules.take(line, m.line_no, rows, source_rows);
  return text_source_table(m.path_, m.rules.names(), rows, std::move(source_rows), m.options);
}

std::uint64_t TextTableReader::bytes_read() const { return impl_->bytes_taken; }

SourceTable read_text_table(const std::string& path, const TextReadOptions& options) {
  check_input_file(path);
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

std::optional<double> cell_number(const Column& c, std::size_t r) {
  if (c.is_null(r)) return std::nullopt;
  if (c.type != ColumnType::kText) return c.as_real(r);
  double v = 0;
  if (!parse_real(c.text[r], v)) return std::nullopt;
  return v;
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
      if (col.type == ColumnType::kReal && !col.is_null(r))
        out += fmt::format("{}", col.real[r]);  // shortest round-trip form
      else
        out += quote_csv(col.to_string(r));
    }
    out += '\n';
  }
  return out;
}

void write_csv_table(const StarTable& table, const std::string& path) {
  write_file_atomically(path, format_csv_table(table));
}

}  // namespace rungcal
