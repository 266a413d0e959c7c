// SPDX-License-Identifier: MIT
// ECSV reader. Format: astropy's "ECSV" specification (astropy APE 6, version 1.0).
#include "rungcal/table/ecsv_io.hpp"

#include <yaml.h>

#include <algorithm>
#include <charconv>
#include <fstream>
#include <iterator>
#include <limits>
#include <memory>
#include <optional>
#include <sstream>
#include <utility>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

// A YAML node as far as an ECSV header needs: a scalar, a sequence or a mapping.
struct YamlNode {
  enum class Kind { kScalar, kSequence, kMapping } kind = Kind::kScalar;
  std::string scalar;
  std::vector<YamlNode> items;  // sequence
  // Mapping, in file order: keys[i] -> values[i] (two vectors: a vector of pairs would need
  // YamlNode complete here).
  std::vector<std::string> keys;
  std::vector<YamlNode> values;
  const YamlNode* find(const std::string& key) const {
    for (std::size_t i = 0; i < keys.size(); ++i)
      if (keys[i] == key) return &values[i];
    return nullptr;
  }
};

[[noreturn]] void header_error(const std::string& file, std::int64_t line,
                               const std::string& message) {
  throw InputError({file, line, {}, "line"}, "ecsv_header", message);
}

// Builds YamlNode trees from libyaml's events (a document's root node).
class YamlReader {
 public:
  YamlReader(const std::string& text, std::string file, std::int64_t first_line)
      : file_(std::move(file)), first_line_(first_line) {
    yaml_parser_initialize(&parser_);
    yaml_parser_set_input_string(&parser_, reinterpret_cast<const unsigned char*>(text.data()),
                                 text.size());
  }
  ~YamlReader() { yaml_parser_delete(&parser_); }
  YamlReader(const YamlReader&) = delete;
  YamlReader& operator=(const YamlReader&) = delete;

  YamlNode document() {
    for (;;) {
      Event e = next();
      if (e.get().type == YAML_DOCUMENT_START_EVENT) break;
      if (e.get().type == YAML_STREAM_END_EVENT)
        header_error(file_, first_line_, "the YAML header is empty");
    }
    Event first = next();
    return node(first, 0);
  }

 private:
  // Owns one libyaml event.
  class Event {
   public:
    Event() = default;
    Event(const Event&) = delete;
    Event& operator=(const Event&) = delete;
    Event(Event&& o) noexcept : e_(o.e_), live_(o.live_) { o.live_ = false; }
    ~Event() {
      if (live_) yaml_event_delete(&e_);
    }
    yaml_event_t& get() { return e_; }
    void set_live() { live_ = true; }

   private:
    yaml_event_t e_{};
    bool live_ = false;
  };

  Event next() {
    Event e;
    if (!yaml_parser_parse(&parser_, &e.get()))
      header_error(file_, first_line_ + static_cast<std::int64_t>(parser_.problem_mark.line),
                   fmt::format("the YAML header does not parse: {}",
                               parser_.problem ? parser_.problem : "unknown error"));
    e.set_live();
    return e;
  }

  // An ECSV header nests a few levels; a deeper one is refused before it exhausts the stack.
  static constexpr int kMaxDepth = 64;

  YamlNode node(Event& e, int depth) {
    if (depth > kMaxDepth)
      header_error(file_, first_line_,
                   fmt::format("the YAML header nests deeper than {} levels", kMaxDepth));
    YamlNode n;
    switch (e.get().type) {
      case YAML_SCALAR_EVENT:
        n.scalar.assign(reinterpret_cast<const char*>(e.get().data.scalar.value),
                        e.get().data.scalar.length);
        return n;
      case YAML_SEQUENCE_START_EVENT:
        n.kind = YamlNode::Kind::kSequence;
        for (;;) {
          Event item = next();
          if (item.get().type == YAML_SEQUENCE_END_EVENT) return n;
          n.items.push_back(node(item, depth + 1));
        }
      case YAML_MAPPING_START_EVENT:
        n.kind = YamlNode::Kind::kMapping;
        for (;;) {
          Event key = next();
          if (key.get().type == YAML_MAPPING_END_EVENT) return n;
          YamlNode k = node(key, depth + 1);
          Event value = next();
          n.keys.push_back(std::move(k.scalar));
          n.values.push_back(node(value, depth + 1));
        }
      case YAML_ALIAS_EVENT:
        header_error(file_, first_line_, "the YAML header uses an alias, which ECSV does not");
      default:
        header_error(file_, first_line_, "the YAML header has an unexpected structure");
    }
  }

  yaml_parser_t parser_{};
  std::string file_;
  std::int64_t first_line_;
};

// One column as the header declares it.
struct EcsvColumn {
  std::string name, datatype, unit, subtype;
  ColumnType type = ColumnType::kText;
};

ColumnType type_of(const std::string& datatype, const std::string& file, std::int64_t line,
                   const std::string& name) {
  if (datatype == "string") return ColumnType::kText;
  if (datatype == "bool") return ColumnType::kBoolean;
  for (const char* t : {"int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64"})
    if (datatype == t) return ColumnType::kInteger;
  for (const char* t : {"float16", "float32", "float64", "float128"})
    if (datatype == t) return ColumnType::kReal;
  throw InputError({file, line, name, "line"}, "ecsv_header",
                   fmt::format("datatype '{}' is not an ECSV datatype", datatype));
}

// The fields of one data line: runs of spaces (delimiter ' ') or single commas separate
// them; double quotes enclose a field, "" inside is one quote. A quoted empty field is "".
std::vector<std::string> split_line(std::string_view line, char delimiter, const std::string& file,
                                    std::int64_t line_no) {
  std::vector<std::string> out;
  std::size_t i = 0;
  const std::size_t n = line.size();
  auto skip_spaces = [&] {
    while (i < n && line[i] == ' ') ++i;
  };
  if (delimiter == ' ') skip_spaces();
  if (i == n) return out;
  for (;;) {
    std::string field;
    if (i < n && line[i] == '"') {
      ++i;
      for (;;) {
        if (i >= n)
          throw InputError({file, line_no, {}, "line"}, "unterminated_quote",
                           "a quoted field does not end on its line");
        if (line[i] == '"') {
          if (i + 1 < n && line[i + 1] == '"') {
            field += '"';
            i += 2;
            continue;
          }
          ++i;
          break;
        }
        field += line[i++];
      }
    } else {
      while (i < n && line[i] != delimiter) field += line[i++];
    }
    out.push_back(std::move(field));
    if (delimiter == ' ') {
      skip_spaces();
      if (i >= n) return out;
    } else {
      if (i >= n) return out;
      ++i;  // the comma
      if (i == n) {
        out.emplace_back();
        return out;
      }
    }
  }
}

// The element type an array column's subtype names ("float64[null]" -> "float64", "bool[3]"
// -> "bool"; ECSV 1.0).
std::string subtype_element(const std::string& subtype) {
  return subtype.substr(0, subtype.find('['));
}

// A flat JSON array of numbers, true/false and null ("[1.5,null,NaN]", the ECSV encoding of
// an array cell); nullopt when the text is not one.
std::optional<std::vector<double>> json_flat_array(std::string_view s, bool logical) {
  auto skip = [&](std::size_t& i) {
    while (i < s.size() && (s[i] == ' ' || s[i] == '\t')) ++i;
  };
  std::size_t i = 0;
  skip(i);
  if (i >= s.size() || s[i] != '[') return std::nullopt;
  ++i;
  std::vector<double> out;
  skip(i);
  if (i < s.size() && s[i] == ']') {
    ++i;
    skip(i);
    return i == s.size() ? std::optional(out) : std::nullopt;
  }
  for (;;) {
    skip(i);
    std::size_t e = i;
    while (e < s.size() && s[e] != ',' && s[e] != ']' && s[e] != ' ') ++e;
    const std::string_view x = s.substr(i, e - i);
    double v = 0;
    if (x == "null" || x == "NaN") {
      v = std::numeric_limits<double>::quiet_NaN();
    } else if (logical) {
      if (x != "true" && x != "false") return std::nullopt;
      v = x == "true" ? 1 : 0;
    } else if (x.empty() || !parse_real(x, v)) {
      return std::nullopt;
    }
    out.push_back(v);
    i = e;
    skip(i);
    if (i >= s.size()) return std::nullopt;
    if (s[i] == ']') break;
    if (s[i] != ',') return std::nullopt;
    ++i;
  }
  ++i;
  skip(i);
  return i == s.size() ? std::optional(out) : std::nullopt;
}

}  // namespace

bool looks_like_ecsv(const std::string& path) {
  check_input_file(path);  // a FIFO or a folder is refused, never waited on
  std::ifstream in(path, std::ios::binary);
  char head[7] = {};
  in.read(head, 7);
  return in.gcount() == 7 && std::string_view(head, 7) == "# %ECSV";
}

SourceTable read_ecsv_table(const std::string& path, const std::vector<std::string>& arrays) {
  return parse_ecsv_table(read_input_file(path), path, arrays);
}

SourceTable parse_ecsv_table(const std::string& content, const std::string& name,
                             const std::vector<std::string>& arrays) {
  // Lines, without CR.
  std::vector<std::string_view> lines;
  for (std::size_t pos = 0; pos < content.size();) {
    std::size_t end = content.find('\n', pos);
    if (end == std::string::npos) end = content.size();
    std::string_view l(content.data() + pos, end - pos);
    if (!l.empty() && l.back() == '\r') l.remove_suffix(1);
    lines.push_back(l);
    pos = end + 1;
  }
  if (lines.empty() || lines[0].rfind("# %ECSV ", 0) != 0)
    header_error(name, 1, "not an ECSV file: the first line is not '# %ECSV <version>'");
  // The YAML header: the '#' lines after the signature, without "# ".
  std::string yaml;
  std::size_t k = 1;
  for (; k < lines.size() && !lines[k].empty() && lines[k][0] == '#'; ++k) {
    std::string_view l = lines[k].substr(1);
    if (!l.empty() && l[0] == ' ') l.remove_prefix(1);
    yaml.append(l).push_back('\n');
  }
  YamlNode root = YamlReader(yaml, name, 2).document();
  if (root.kind != YamlNode::Kind::kMapping)
    header_error(name, 2, "the YAML header is not a mapping");
  const YamlNode* datatype = root.find("datatype");
  if (!datatype || datatype->kind != YamlNode::Kind::kSequence || datatype->items.empty())
    header_error(name, 2, "the YAML header has no 'datatype' list of columns");
  char delimiter = ' ';
  if (const YamlNode* d = root.find("delimiter")) {
    if (d->scalar != " " && d->scalar != ",")
      header_error(name, 2, fmt::format("delimiter '{}' is not ' ' or ','", d->scalar));
    delimiter = d->scalar[0];
  }
  std::vector<EcsvColumn> columns;
  for (const auto& item : datatype->items) {
    EcsvColumn c;
    const YamlNode* n = item.find("name");
    const YamlNode* t = item.find("datatype");
    if (item.kind != YamlNode::Kind::kMapping || !n || !t)
      header_error(name, 2, "each 'datatype' entry needs a name and a datatype");
    c.name = n->scalar;
    c.datatype = t->scalar;
    if (const YamlNode* u = item.find("unit")) c.unit = u->scalar;
    if (const YamlNode* s = item.find("subtype")) c.subtype = s->scalar;
    c.type = type_of(c.datatype, name, 2, c.name);
    columns.push_back(std::move(c));
  }

  SourceTable out;
  out.file = name;
  out.row_label = "line";
  // The column-name line: the first line after the header that is not blank.
  while (k < lines.size() && lines[k].find_first_not_of(' ') == std::string_view::npos) ++k;
  if (k >= lines.size())
    header_error(name, static_cast<std::int64_t>(k), "the file has no column-name line");
  const auto names_line = static_cast<std::int64_t>(k + 1);
  std::vector<std::string> names = split_line(lines[k], delimiter, name, names_line);
  std::vector<std::string> declared;
  for (const auto& c : columns) declared.push_back(c.name);
  if (names != declared)
    header_error(name, names_line,
                 fmt::format("the YAML header lists the columns {} but the column-name line has {}",
                             fmt::join(declared, ", "), fmt::join(names, ", ")));
  std::vector<Column*> cols(columns.size(), nullptr);
  std::vector<ArrayColumn*> array_cols(columns.size(), nullptr);
  for (std::size_t c = 0; c < columns.size(); ++c) {
    const bool wanted = std::find(arrays.begin(), arrays.end(), columns[c].name) != arrays.end();
    if (!columns[c].subtype.empty() && wanted && !out.arrays.count(columns[c].name)) {
      const std::string element = subtype_element(columns[c].subtype);
      const ColumnType type = type_of(element, name, 2, columns[c].name);
      if (type == ColumnType::kText)
        header_error(name, 2,
                     fmt::format("column {} has subtype {}: an array of strings", columns[c].name,
                                 columns[c].subtype));
      array_cols[c] = &out.arrays[columns[c].name];
      array_cols[c]->unit = columns[c].unit;
      array_cols[c]->logical = type == ColumnType::kBoolean;
      continue;
    }
    if (!columns[c].subtype.empty()) {
      out.unusable_columns[columns[c].name] = fmt::format(
          "an array column (subtype {}): rungcal reads one value per star", columns[c].subtype);
      continue;
    }
    cols[c] = &out.table.add_column(columns[c].name, columns[c].type, columns[c].unit);
  }
  for (++k; k < lines.size(); ++k) {
    const auto line_no = static_cast<std::int64_t>(k + 1);
    if (lines[k].find_first_not_of(' ') == std::string_view::npos) continue;  // blank
    if (lines[k][0] == '#') continue;
    std::vector<std::string> fields = split_line(lines[k], delimiter, name, line_no);
    if (fields.size() != columns.size())
      throw InputError(
          {name, line_no, {}, "line"}, "field_count",
          fmt::format("{} fields where the header has {} columns", fields.size(), columns.size()));
    for (std::size_t c = 0; c < columns.size(); ++c) {
      if (ArrayColumn* a = array_cols[c]) {
        auto v = fields[c].empty() ? std::optional(std::vector<double>{})
                                   : json_flat_array(fields[c], a->logical);
        if (!v)
          throw InputError({name, line_no, columns[c].name, "line"}, "ecsv_value",
                           fmt::format("'{}' is not a JSON array of {} values, which the header's "
                                       "subtype {} says the column holds",
                                       fields[c].substr(0, 80), subtype_element(columns[c].subtype),
                                       columns[c].subtype));
        a->rows.push_back(std::move(*v));
        continue;
      }
      if (!cols[c]) continue;
      Column& col = *cols[c];
      const std::string& f = fields[c];
      if (f.empty()) {
        col.push_null();
        continue;
      }
      auto lie = [&] {
        throw InputError(
            {name, line_no, columns[c].name, "line"}, "ecsv_value",
            fmt::format("'{}' is not a {} value, which the header says the column holds", f,
                        columns[c].datatype));
      };
      switch (col.type) {
        case ColumnType::kText:
          col.push_text(f);
          break;
        case ColumnType::kReal: {
          double x = 0;
          if (!parse_real(f, x)) lie();
          col.push_real(x);
          break;
        }
        case ColumnType::kInteger: {
          std::int64_t x = 0;
          const char* b = f.data() + (f[0] == '+' ? 1 : 0);
          auto [end, ec] = std::from_chars(b, f.data() + f.size(), x);
          if (ec != std::errc() || end != f.data() + f.size()) lie();
          col.push_integer(x);
          break;
        }
        case ColumnType::kBoolean:
          if (f == "True" || f == "true" || f == "1")
            col.push_boolean(true);
          else if (f == "False" || f == "false" || f == "0")
            col.push_boolean(false);
          else
            lie();
          break;
      }
    }
    out.source_rows.push_back(line_no);
  }
  return out;
}

}  // namespace rungcal
