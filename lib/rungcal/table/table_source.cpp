// SPDX-License-Identifier: MIT
#include "rungcal/table/table_source.hpp"

#include <algorithm>

#include <fmt/format.h>

#include "rungcal/table/ecsv_io.hpp"
#include "rungcal/table/votable_io.hpp"

namespace rungcal {

bool has_fits_extension(const std::string& path) {
  std::string p = path;
  std::transform(p.begin(), p.end(), p.begin(), ::tolower);
  for (const char* ext : {".fits", ".fit", ".fts", ".fits.gz", ".fit.gz"}) {
    std::string e = ext;
    if (p.size() >= e.size() && p.compare(p.size() - e.size(), e.size(), e) == 0) return true;
  }
  return false;
}

TableSourceSpec table_source_from_section(const Config& config, const ConfigSection& source) {
  TableSourceSpec o;
  o.path = config.resolve_path(source.require_string("path"));
  std::string format = source.string_or("format", has_fits_extension(o.path)      ? "fits"
                                                  : has_votable_extension(o.path) ? "votable"
                                                                                  : "text");
  if (format != "fits" && format != "text" && format != "ecsv" && format != "votable")
    source.fail("format", "must be \"fits\", \"text\", \"ecsv\" or \"votable\"");
  o.is_fits = format == "fits";
  o.is_votable = format == "votable";
  if (source.has("hdu")) {
    if (source.is_string("hdu"))
      o.hdu.name = *source.get_string("hdu");
    else
      o.hdu.index = static_cast<int>(*source.get_integer("hdu"));
    if (!o.is_fits) source.fail("hdu", "only FITS sources have HDUs");
  }
  if (auto d = source.get_string("delimiter")) {
    auto parsed = kDelimiterNames.parse(*d);
    if (!parsed)
      source.fail("delimiter",
                  fmt::format("'{}' is not one of: {}", *d, kDelimiterNames.choices()));
    o.text.delimiter = *parsed;
  }
  o.text.has_header = source.bool_or("header", true);
  o.text.header_prefix = source.string_or("header_prefix", "");
  o.text.comment_prefix = source.string_or("comment_prefix", "#");
  o.text.skip_lines = static_cast<std::size_t>(source.integer_or("skip_lines", 0));
  if (auto m = source.get_string_list("missing")) o.text.missing = *m;
  if (auto names = source.get_string_list("column_names")) o.text.column_names = *names;
  const std::int64_t max_field = source.integer_or("max_field_bytes", 65536);
  if (max_field < 1 || max_field > (std::int64_t{1} << 30))
    source.fail("max_field_bytes", "must be 1 to 2^30 bytes");
  o.text.max_field_bytes = static_cast<std::size_t>(max_field);
  return o;
}

SourceTable read_table_source(const TableSourceSpec& spec) {
  if (spec.is_fits) return read_fits_table(spec.path, spec.hdu, spec.array_columns);
  if (spec.is_votable) return read_votable_table(spec.path, spec.array_columns);
  // An ECSV table is known by its first line and carries its own types and units.
  if (looks_like_ecsv(spec.path)) return read_ecsv_table(spec.path, spec.array_columns);
  return read_text_table(spec.path, spec.text);
}

}  // namespace rungcal
