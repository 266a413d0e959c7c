// SPDX-License-Identifier: MIT
#include "rungcal/ingest/ingest_parts.hpp"

#include <algorithm>
#include <cmath>
#include <iterator>
#include <optional>
#include <string>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal::ingest_parts {
namespace {

[[noreturn]] void whole_file_error(const IngestOptions& o, const std::string& column,
                                   const std::string& rule, const std::string& message) {
  throw InputError({o.input_path, {}, column}, rule, message);
}

Resolved resolve(const ValueSource& src, const std::string& key, QuantityKind kind,
                 const SourceTable& in, const IngestOptions& o) {
  Resolved r;
  r.key = key;
  r.constant = src.constant;
  if (src.column.empty()) {
    if (src.constant && std::holds_alternative<double>(*src.constant) && !src.unit.empty()) {
      auto conv = unit_conversion(kind, src.unit);
      if (!conv)
        whole_file_error(o, "", "bad_unit",
                         fmt::format("'{}' is not a unit for {} (accepted: {})", src.unit, key,
                                     accepted_units(kind)));
      r.constant = conv->apply(std::get<double>(*src.constant));
    }
    return r;
  }
  r.column_name = src.column;
  if (!in.table.has(src.column)) {
    auto bad = in.unusable_columns.find(src.column);
    if (bad != in.unusable_columns.end())
      whole_file_error(o, src.column, "column_type", bad->second);
    std::string names;
    for (const auto& n : in.table.column_names()) names += (names.empty() ? "" : ", ") + n;
    if (names.size() > 300) names = names.substr(0, 300) + ", ...";
    whole_file_error(
        o, src.column, "missing_column",
        fmt::format("the config maps {} to this column, which the file does not have (it has: {})",
                    key, names));
  }
  r.column = &in.table.column(src.column);
  std::string unit = src.unit.empty() ? r.column->unit : src.unit;
  if (unit.empty()) unit = canonical_unit(kind);
  auto conv = unit_conversion(kind, unit);
  if (!conv)
    whole_file_error(o, src.column, "bad_unit",
                     fmt::format("unit '{}' is not a unit for {} (accepted: {})", unit, key,
                                 accepted_units(kind)));
  if (!src.unit.empty() && !r.column->unit.empty() && r.column->unit != src.unit) {
    auto file_conv = unit_conversion(kind, r.column->unit);
    if (!file_conv || file_conv->scale != conv->scale ||
        file_conv->log10_input != conv->log10_input)
      whole_file_error(o, src.column, "unit_conflict",
                       fmt::format("the config says unit '{}' but the file's TUNIT says '{}'",
                                   src.unit, r.column->unit));
  }
  r.conversion = *conv;
  // A numeric quantity in a text column none of whose values parse is a wrong mapping,
  // not a hundred bad rows.
  if (kind != QuantityKind::kDimensionless || key == "ruwe" || key == "astrometric_params") {
    if (r.column->type == ColumnType::kText) {
      std::size_t nonnull = 0, parsed = 0;
      for (std::size_t i = 0; i < r.column->size(); ++i) {
        if (r.column->is_null(i)) continue;
        ++nonnull;
        double x;
        if (parse_real(r.column->text[i], x)) ++parsed;
      }
      if (nonnull > 0 && parsed == 0)
        whole_file_error(
            o, src.column, "column_type",
            fmt::format("{} must be numeric, but no value in this column is a number (e.g. '{}')",
                        key,
                        r.column->text[std::distance(
                            r.column->null.begin(),
                            std::find(r.column->null.begin(), r.column->null.end(), 0))]));
    } else if (r.column->type == ColumnType::kBoolean) {
      whole_file_error(o, src.column, "column_type",
                       fmt::format("{} must be numeric, not a logical column", key));
    }
  }
  return r;
}

}  // namespace

GroupMapping resolve_group(const IngestOptions& o, const SourceTable& in) {
  GroupMapping m;
  for (const auto& [k, src] : o.quantities)
    m.quantities[k] = resolve(src, k, find_quantity(k)->kind, in, o);
  // A star list without periods gets them from its light curves (IngestOptions::check): an
  // unmapped period reads as missing in every row until the join.
  m.quantities.try_emplace("period", Resolved{"period", nullptr, "", {}, std::nullopt});
  m.ecl_lat_from_ra_dec = ecl_lat_from_ra_dec(o);
  for (const auto& b : o.bands)
    m.bands.push_back(
        {b.band, resolve(b.mag, "magnitude " + b.band, QuantityKind::kMagnitude, in, o),
         resolve(b.err, "magnitude error " + b.band, QuantityKind::kMagnitude, in, o)});
  for (const auto& s : o.selection) {
    if (!in.table.has(s.column))
      whole_file_error(o, s.column, "missing_column",
                       "a [[select]] rule names this column, which the file does not have");
    m.select_columns.push_back(&in.table.column(s.column));
  }
  for (const auto& e : o.extras) {
    if (!in.table.has(e.column))
      whole_file_error(
          o, e.column, "missing_column",
          fmt::format("[extra] {} names this column, which the file does not have", e.name));
    m.extra_columns.push_back(&in.table.column(e.column));
  }
  return m;
}

UnitSample unit_sample(const IngestOptions& o, const GroupMapping& m, const SourceTable& in) {
  UnitSample s;
  s.file = o.input_path;
  auto value = [](const Resolved& r, std::size_t row) -> std::optional<double> {
    try {
      return number_at(r, row);
    } catch (const RowReject&) {
      return std::nullopt;
    }
  };
  auto unit_of = [&](const std::string& key, const Resolved& r) {
    const std::string& given = o.quantities.at(key).unit;
    return given.empty() ? r.column->unit : given;
  };
  const std::size_t n = in.table.rows();
  if (auto it = m.quantities.find("parallax"); it != m.quantities.end() && it->second.column) {
    s.parallax_column = it->second.column_name;
    s.parallax_unit = unit_of("parallax", it->second);
    for (std::size_t r = 0; r < n; ++r)
      if (auto v = value(it->second, r)) s.parallax_mas.push_back(*v);
  }
  std::vector<std::string> classes(n);  // canonical, "" when unknown
  {
    const Resolved& cls = m.at("pulsator_class");
    std::string scratch;
    for (std::size_t r = 0; r < n; ++r)
      if (const std::string* text = text_ref(cls, r, scratch))
        classes[r] = canonical_choice(*text, o.class_aliases, builtin_class_aliases(), false);
  }
  const Resolved& period = m.at("period");
  if (period.column) {
    s.period_column = period.column_name;
    s.period_unit = unit_of("period", period);
    for (std::size_t r = 0; r < n; ++r)
      if (auto v = value(period, r); v && !classes[r].empty())
        s.period_d_by_class[classes[r]].push_back(*v);
  }
  auto plx = m.quantities.find("parallax"), plx_err = m.quantities.find("parallax_err");
  if (plx == m.quantities.end() || plx_err == m.quantities.end()) return s;
  for (std::size_t r = 0; r < n; ++r) {
    const auto p = value(plx->second, r), e = value(plx_err->second, r);
    if (classes[r].empty() || !p || !e || !(*e > 0) || *p < 5 * *e) continue;
    for (const auto& b : m.bands)
      if (auto mag = b.mag.column ? value(b.mag, r) : std::nullopt)
        s.absolute_mag_by_class[classes[r]][b.mag.column_name].push_back(
            *mag + 5 * std::log10(*p / 100.0));
  }
  return s;
}

CatalogLayout make_catalog_layout(const IngestOptions& o, const GroupMapping& m) {
  CatalogLayout l;
  auto add_column = [&](const std::string& name, ColumnType type, const std::string& unit,
                        const std::string& description) {
    l.schema.add_column(name, type, unit, description);
    return l.schema.columns() - 1;
  };
  auto add = [&](const QuantitySpec& spec) {
    return add_column(std::string(spec.column), spec.type, canonical_unit(spec.kind),
                      std::string(spec.description));
  };
  l.id = add(*find_quantity("id"));
  l.source_row = add_column(col::kSourceRow, ColumnType::kInteger, "", "line or row in the input");
  l.period = add(*find_quantity("period"));
  l.log_period = add_column(col::kLogPeriod, ColumnType::kReal, "", "log10 of the period in days");
  for (const auto& spec : catalog_quantities()) {
    std::string k(spec.key);
    const bool computed = k == "ecl_lat" && m.ecl_lat_from_ra_dec;
    if (k == "id" || k == "period" || !(m.quantities.count(k) || computed)) continue;
    l.quantities[k] = add(spec);
  }
  std::string band_list;
  for (const auto& b : m.bands) {
    // Two statements: the magnitude column must come before its error in the file.
    const std::size_t mag = add_column(magnitude_column(b.band), ColumnType::kReal, "mag",
                                       "mean magnitude in " + b.band);
    const std::size_t err = add_column(magnitude_error_column(b.band), ColumnType::kReal, "mag",
                                       "error of mag_" + b.band);
    l.bands.emplace_back(mag, err);
    band_list += (band_list.empty() ? "" : ",") + b.band;
  }
  for (std::size_t i = 0; i < o.extras.size(); ++i) {
    const Column* src = m.extra_columns[i];
    l.extras.push_back(add_column(o.extras[i].name, src->type,
                                  o.extras[i].unit.empty() ? src->unit : o.extras[i].unit,
                                  "copied from input column " + o.extras[i].column));
  }
  l.schema.set_keyword(key::kBands, band_list, "bands with mag_<band> columns");
  return l;
}

}  // namespace rungcal::ingest_parts
