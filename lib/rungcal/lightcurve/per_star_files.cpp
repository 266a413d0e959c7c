// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/per_star_files.hpp"

#include <cmath>
#include <filesystem>
#include <optional>
#include <regex>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/stage_files.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

// name_pattern as a regular expression: literal text escaped, {star} and {band} captured,
// neither crossing a folder separator. A pattern with folders ("{band}/{star}.dat") is
// matched against as many trailing parts of each path as it has.
struct NameRegex {
  std::regex re;
  int star_group = 0, band_group = 0;  // 0 = not in the pattern
  std::size_t parts = 1;               // path parts the pattern spans
};

NameRegex name_regex(const std::string& pattern) {
  NameRegex n;
  std::string re;
  int group = 0;
  for (std::size_t i = 0; i < pattern.size();) {
    if (pattern.compare(i, 6, "{star}") == 0) {
      re += "([^/]+?)", n.star_group = ++group, i += 6;
    } else if (pattern.compare(i, 6, "{band}") == 0) {
      re += "([^./]+?)", n.band_group = ++group, i += 6;
    } else {
      if (pattern[i] == '/') ++n.parts;
      if (std::string("\\^$.|?*+()[]{}").find(pattern[i]) != std::string::npos) re += '\\';
      re += pattern[i++];
    }
  }
  n.re = std::regex(re);
  return n;
}

// The last `parts` parts of a path joined by '/' ("phot/I/S1.dat", 2 -> "I/S1.dat"), or the
// whole path when it has fewer.
std::string path_tail(const std::string& path, std::size_t parts) {
  std::vector<std::string> names;
  for (const auto& p : std::filesystem::path(path)) names.push_back(p.string());
  std::string tail;
  for (std::size_t i = names.size() > parts ? names.size() - parts : 0; i < names.size(); ++i)
    tail += (tail.empty() ? "" : "/") + names[i];
  return tail;
}

const Column& column_of(const SourceTable& in, const std::string& name) {
  if (!in.table.has(name))
    throw InputError({in.file, {}, name}, "missing_column",
                     "the light-curve file has no such column (headerless files: name them with "
                     "[source] column_names)");
  return in.table.column(name);
}

}  // namespace

std::string PerStarFiles::check() const {
  if (!enabled()) return "";
  if (name_pattern.find("{star}") == std::string::npos)
    return "source.name_pattern: must hold {star}, where the star id sits in each file name";
  if (name_pattern.front() == '/' || name_pattern.back() == '/' ||
      name_pattern.find("//") != std::string::npos || name_pattern.find("..") != std::string::npos)
    return "source.name_pattern: the end of each file's path, e.g. \"{star}.dat\" or "
           "\"{band}/{star}.dat\" (no leading or trailing '/', no '//' or '..')";
  for (const char* part : {"{star}", "{band}"}) {
    const std::size_t first = name_pattern.find(part);
    if (first != std::string::npos && name_pattern.find(part, first + 1) != std::string::npos)
      return fmt::format("source.name_pattern: {} more than once", part);
  }
  if (!band.empty() && name_pattern.find("{band}") != std::string::npos)
    return "source.band: not with {band} in name_pattern (the band comes from the name)";
  if (!std::isfinite(time_offset_d)) return "source.time_offset_d: must be a finite number of days";
  return "";
}

std::vector<std::string> per_star_file_list(const std::string& pattern) {
  // The same matches rungcal-run keys the stage by (declared_files).
  std::vector<std::string> files = files_matching(pattern);
  if (files.empty())
    throw InputError({pattern, {}, "path", "line", "key"}, "no_files",
                     "no light-curve file matches this pattern");
  return files;
}

SourceTable read_per_star_files(const TableSourceSpec& spec, const PerStarFiles& files,
                                const LightCurveColumns& cols, std::vector<InputRecord>& inputs) {
  const NameRegex name = name_regex(files.name_pattern);
  SourceTable out;
  out.file = spec.path;
  out.row_label = "line";
  StarTable& t = out.table;
  t.add_column(cols.star, ColumnType::kText);
  t.add_column(cols.band, ColumnType::kText);
  for (const std::string* c : {&cols.time, &cols.mag, &cols.err})
    t.add_column(*c, ColumnType::kReal);
  for (const std::string& path : per_star_file_list(spec.path)) {
    const std::string base = path_tail(path, name.parts);
    std::smatch m;
    if (!std::regex_match(base, m, name.re))
      throw InputError(
          {path, {}, "name_pattern"}, "file_name_pattern",
          name.parts == 1
              ? fmt::format("the file name does not match '{}'", files.name_pattern)
              : fmt::format("the path's end '{}' does not match '{}'", base, files.name_pattern));
    TableSourceSpec one = spec;
    one.path = path;
    const SourceTable in = read_table_source(one);
    inputs.push_back({path, sha256_file(path), static_cast<std::int64_t>(in.table.rows())});
    const std::string star = m[name.star_group].str();
    const bool band_in_file = !name.band_group && files.band.empty();
    const std::string band = name.band_group ? m[name.band_group].str() : files.band;
    const Column& time = column_of(in, cols.time);
    const Column& mag = column_of(in, cols.mag);
    const Column& err = column_of(in, cols.err);
    const Column* band_col = band_in_file ? &column_of(in, cols.band) : nullptr;
    for (std::size_t r = 0; r < in.table.rows(); ++r) {
      t.column(cols.star).push_text(star);
      if (band_col && band_col->is_null(r))
        t.column(cols.band).push_null();
      else
        t.column(cols.band).push_text(band_col ? band_col->to_string(r) : band);
      const std::optional<double> when = cell_number(time, r);
      when ? t.column(cols.time).push_real(*when + files.time_offset_d)
           : t.column(cols.time).push_null();
      for (const auto& [from, to] : {std::pair{&mag, &cols.mag}, std::pair{&err, &cols.err}}) {
        const std::optional<double> v = cell_number(*from, r);
        v ? t.column(*to).push_real(*v) : t.column(*to).push_null();
      }
      out.source_rows.push_back(in.source_rows[r]);
    }
  }
  return out;
}

}  // namespace rungcal
