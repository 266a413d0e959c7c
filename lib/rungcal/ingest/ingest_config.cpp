// SPDX-License-Identifier: MIT
#include "rungcal/ingest/ingest_parts.hpp"

#include <map>
#include <set>
#include <string>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/file_names.hpp"
#include "rungcal/ingest/column_keys.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/table_source.hpp"

namespace rungcal {
namespace ingest_parts {

const std::map<std::string, std::string>& builtin_mode_aliases() {
  static const std::map<std::string, std::string> kAliases = {
      {"F", "fundamental"},          {"FU", "fundamental"},     {"FM", "fundamental"},
      {"DCEP_F", "fundamental"},     {"RRab", "fundamental"},   {"RRAB", "fundamental"},
      {"1O", "first_overtone"},      {"FO", "first_overtone"},  {"1OT", "first_overtone"},
      {"DCEP_1O", "first_overtone"}, {"RRc", "first_overtone"}, {"RRC", "first_overtone"},
      {"2O", "second_overtone"},     {"RRd", "double_mode"},    {"F/1O", "double_mode"},
      {"1O/2O", "double_mode"},
  };
  return kAliases;
}

const std::map<std::string, std::string>& builtin_class_aliases() {
  static const std::map<std::string, std::string> kAliases = {
      {"DCEP", "classical_cepheid"}, {"CEP", "classical_cepheid"}, {"T2CEP", "type2_cepheid"},
      {"ACEP", "anomalous_cepheid"}, {"RRLYR", "rr_lyrae"},        {"RRL", "rr_lyrae"},
  };
  return kAliases;
}

std::string canonical_choice(const std::string& value,
                             const std::map<std::string, std::string>& config_aliases,
                             const std::map<std::string, std::string>& builtin, bool is_mode) {
  if (auto it = config_aliases.find(value); it != config_aliases.end()) return it->second;
  if (is_mode ? kPulsationModeNames.parse(value).has_value()
              : kPulsatorClassNames.parse(value).has_value())
    return value;
  if (auto it = builtin.find(value); it != builtin.end()) return it->second;
  return "";
}

}  // namespace ingest_parts

namespace {

ValueSource value_source_from(const ConfigSection& s, const std::string& key) {
  ValueSource v;
  if (s.is_string(key)) {
    v.column = *s.get_string(key);
    return v;
  }
  if (!s.is_table(key)) {
    v.constant = *s.get_number(key);
    return v;
  }
  auto t = s.section(key);
  if (!t) s.fail(key, "must be a column name, a number, or a table { column = ..., unit = ... }");
  v.column = t->string_or("column", "");
  v.unit = t->string_or("unit", "");
  if (t->has("value")) {
    if (t->is_string("value"))
      v.constant = *t->get_string("value");
    else
      v.constant = *t->get_number("value");
  }
  if (v.column.empty() == !v.constant.has_value())
    s.fail(key, "give exactly one of 'column' and 'value'");
  return v;
}

void read_alias_table(const ConfigSection& root, const std::string& name, bool is_mode,
                      std::map<std::string, std::string>& out) {
  auto sec = root.section(name);
  if (!sec) return;
  for (const auto& k : sec->keys()) {
    std::string target = *sec->get_string(k);
    bool known = is_mode ? kPulsationModeNames.parse(target).has_value()
                         : kPulsatorClassNames.parse(target).has_value();
    if (!known)
      sec->fail(
          k, fmt::format("'{}' is not one of: {}", target,
                         is_mode ? kPulsationModeNames.choices() : kPulsatorClassNames.choices()));
    out[k] = target;
  }
}

}  // namespace

std::string SelectRule::describe() const {
  std::string v = std::visit([](const auto& x) { return fmt::format("{}", x); }, value);
  return fmt::format("{} {} {}", column, kSelectOpNames.name(op), v);
}

std::string ClassLimits::check() const {
  for (const auto& [cls, max] : parallax_max_mas) {
    if (!kPulsatorClassNames.parse(cls))
      return fmt::format("validate.class_parallax_max_mas.{}: not a pulsator class (known: {})",
                         cls, kPulsatorClassNames.choices());
    if (!(max > 0))
      return fmt::format("validate.class_parallax_max_mas.{}: must be positive (mas)", cls);
  }
  for (const auto& [cls, r] : period_d) {
    if (!kPulsatorClassNames.parse(cls))
      return fmt::format("validate.class_period_known_range_d.{}: not a pulsator class (known: {})",
                         cls, kPulsatorClassNames.choices());
    if (!(r.min > 0 && r.min < r.max))
      return fmt::format(
          "validate.class_period_known_range_d.{}: must be [min, max] days with 0 < min < max",
          cls);
  }
  return "";
}

std::string IngestOptions::check() const {
  if (input_path.empty()) return "source.path: required";
  if (catalog_path.empty()) return "output.catalog: required";
  if (chunk_rows < 1) return "source.chunk_rows: must be at least 1";
  if (!quantities.count("id") && column_preset == ColumnPreset::kNone)
    return "columns.id: required (which input column identifies each star, or a preset)";
  if (!quantities.count("period") && !(lightcurves.periods && !lightcurves.summary_path.empty()))
    return "columns.period: required (a period or log-period column, or a [lightcurves] join "
           "that supplies the periods)";
  if (!quantities.count("mode"))
    return "columns.mode: required (a column, or mode = { value = \"fundamental\" } for all stars)";
  if (!quantities.count("pulsator_class"))
    return "columns.pulsator_class: required (a column, or { value = \"classical_cepheid\" })";
  if (bands.empty() && lightcurves.summary_path.empty())
    return "bands: at least one band is required (or a [lightcurves] join that supplies the "
           "magnitudes)";
  if (!(magnitude_min < magnitude_max))
    return "validate.magnitude_range: the minimum must be below the maximum";
  if (!(ebv_min < ebv_max)) return "validate.ebv_range: the minimum must be below the maximum";
  if (!(parallax_abs_max > 0)) return "validate.parallax_max_mas: must be positive";
  if (!(parallax_err_max > 0)) return "validate.parallax_error_max_mas: must be positive";
  if (!(magnitude_err_max > 0)) return "validate.magnitude_error_max: must be positive";
  if (!(feh_range.min < feh_range.max))
    return "validate.feh_range: the minimum must be below the maximum";
  if (!(period_range.min > 0 && period_range.min < period_range.max))
    return "validate.period_range_d: must be [min, max] days with 0 < min < max";
  for (const auto& [cls, r] : class_period_range) {
    if (!kPulsatorClassNames.parse(cls))
      return fmt::format("validate.class_period_range_d.{}: not a pulsator class (known: {})", cls,
                         kPulsatorClassNames.choices());
    if (!(r.min > 0 && r.min < r.max))
      return fmt::format(
          "validate.class_period_range_d.{}: must be [min, max] days with 0 < min < max", cls);
  }
  if (std::string c = class_limits.check(); !c.empty()) return c;
  std::set<std::string> seen;
  for (const auto& b : bands) {
    if (b.band.empty() || b.band.find_first_of(" ,") != std::string::npos)
      return fmt::format("bands.{}: a band name must be non-empty without spaces or commas",
                         b.band);
    if (!seen.insert(b.band).second) return fmt::format("bands.{}: named twice", b.band);
  }
  if (!input_is_fits) {
    if (std::string t = text.check(); !t.empty()) return "source." + t;
  }
  return unit_checks.check();
}

IngestOptions ingest_options_from_config(Config& config) {
  IngestOptions o;
  ConfigSection root = config.root();
  o.config_file = config.file();
  o.config_sha256 = config.sha256();

  auto source = root.section("source");
  if (!source)
    throw InputError({config.file(), {}, "source", "line", "key"}, "config_missing_key",
                     "a [source] table is required");
  TableSourceSpec spec = table_source_from_section(config, *source);
  o.input_path = spec.path;
  o.input_is_fits = spec.is_fits;
  o.input_is_votable = spec.is_votable;
  o.hdu = spec.hdu;
  o.text = spec.text;
  o.chunk_rows = source->integer_or("chunk_rows", o.chunk_rows);

  if (auto cols = root.section("columns")) {
    for (const auto& k : cols->keys()) {
      if (k == "preset") {
        o.column_preset = choice_or(*cols, k, kColumnPresetNames, o.column_preset);
        continue;
      }
      if (!find_quantity(k))
        throw InputError({config.file(), cols->line_of(k), "columns." + k, "line", "key"},
                         "unknown_config_key", unknown_column_key_message(k));
      o.quantities[k] = value_source_from(*cols, k);
    }
  }
  if (auto bands = root.section("bands")) {
    for (const auto& name : bands->keys()) {
      auto b = bands->section(name);
      if (!b) bands->fail(name, "each band is a table: [bands.NAME] with mag and err");
      BandSource bs;
      bs.band = name;
      if (!b->has("mag")) b->fail("mag", "required: the column of the band's mean magnitude");
      bs.mag = value_source_from(*b, "mag");
      if (b->has("err")) bs.err = value_source_from(*b, "err");
      o.bands.push_back(std::move(bs));
    }
  }
  if (auto extra = root.section("extra")) {
    for (const auto& name : extra->keys()) {
      ExtraColumn e;
      e.name = name;
      if (extra->is_string(name)) {
        e.column = *extra->get_string(name);
      } else if (auto t = extra->section(name)) {
        e.column = t->require_string("column");
        e.unit = t->string_or("unit", "");
      }
      o.extras.push_back(e);
    }
  }
  for (const auto& sel : root.section_list("select")) {
    SelectRule r;
    r.column = sel.require_string("column");
    std::string op = sel.string_or("op", "==");
    auto parsed = kSelectOpNames.parse(op);
    if (!parsed)
      sel.fail("op", fmt::format("'{}' is not one of: {}", op, kSelectOpNames.choices()));
    r.op = *parsed;
    if (sel.is_string("value"))
      r.value = *sel.get_string("value");
    else if (auto v = sel.get_number("value"))
      r.value = *v;
    else
      sel.fail("value", "required: a number or a string");
    o.selection.push_back(r);
  }
  read_alias_table(root, "modes", true, o.mode_aliases);
  read_alias_table(root, "classes", false, o.class_aliases);
  if (auto v = root.section("validate")) {
    if (auto r = v->get_number_list("magnitude_range")) {
      if (r->size() != 2) v->fail("magnitude_range", "must be [min, max]");
      o.magnitude_min = (*r)[0];
      o.magnitude_max = (*r)[1];
    }
    if (auto r = v->get_number_list("ebv_range")) {
      if (r->size() != 2) v->fail("ebv_range", "must be [min, max]");
      o.ebv_min = (*r)[0];
      o.ebv_max = (*r)[1];
    }
    o.require_errors = v->bool_or("require_errors", o.require_errors);
    auto range = [&](const ConfigSection& s, const std::string& key, PlausibleRange& out) {
      if (auto r = s.get_number_list(key)) {
        if (r->size() != 2) s.fail(key, "must be [min, max]");
        out = {(*r)[0], (*r)[1]};
      }
    };
    o.parallax_abs_max = v->number_or("parallax_max_mas", o.parallax_abs_max);
    o.parallax_err_max = v->number_or("parallax_error_max_mas", o.parallax_err_max);
    o.magnitude_err_max = v->number_or("magnitude_error_max", o.magnitude_err_max);
    range(*v, "feh_range", o.feh_range);
    range(*v, "period_range_d", o.period_range);
    if (auto by_class = v->section("class_period_range_d"))
      for (const auto& cls : by_class->keys()) range(*by_class, cls, o.class_period_range[cls]);
    const std::string variants = v->string_or("id_variants", "warn");
    auto parsed = kIdVariantPolicyNames.parse(variants);
    if (!parsed)
      v->fail("id_variants",
              fmt::format("'{}' is not one of: {}", variants, kIdVariantPolicyNames.choices()));
    o.id_variants = *parsed;
    o.unit_checks.policy =
        choice_or(*v, "unit_checks", kUnitCheckPolicyNames, o.unit_checks.policy);
    ClassLimits& limits = o.class_limits;
    limits.parallax_policy =
        choice_or(*v, "class_parallax_check", kUnitCheckPolicyNames, limits.parallax_policy);
    limits.period_policy =
        choice_or(*v, "class_period_check", kUnitCheckPolicyNames, limits.period_policy);
    if (auto by_class = v->section("class_parallax_max_mas"))
      for (const auto& cls : by_class->keys()) {
        auto max = by_class->get_number(cls);
        if (!max) by_class->fail(cls, "must be a number of mas");
        limits.parallax_max_mas[cls] = *max;
      }
    if (auto by_class = v->section("class_period_known_range_d"))
      for (const auto& cls : by_class->keys()) range(*by_class, cls, limits.period_d[cls]);
    PlausibleRange plx{o.unit_checks.parallax_median_min_mas,
                       o.unit_checks.parallax_median_max_mas};
    range(*v, "parallax_median_range_mas", plx);
    o.unit_checks.parallax_median_min_mas = plx.min;
    o.unit_checks.parallax_median_max_mas = plx.max;
    // A [validate.NAME] table of [min, max] per pulsator class, into out.
    auto class_ranges = [&](const std::string& name,
                            std::map<std::string, std::pair<double, double>>& out) {
      auto by_class = v->section(name);
      if (!by_class) return;
      for (const auto& cls : by_class->keys()) {
        if (!kPulsatorClassNames.parse(cls))
          by_class->fail(
              cls, fmt::format("not a pulsator class (known: {})", kPulsatorClassNames.choices()));
        PlausibleRange r;
        range(*by_class, cls, r);
        out[cls] = {r.min, r.max};
      }
    };
    class_ranges("class_period_median_range_d", o.unit_checks.class_period_median_d);
    class_ranges("class_absolute_magnitude_median_range",
                 o.unit_checks.class_absolute_magnitude_median);
  }
  if (auto lc = root.section("lightcurves")) {
    o.lightcurves.summary_path = config.resolve_path(lc->require_string("summary"));
    std::string use = lc->string_or("use", "replace");
    auto parsed = kJoinUseNames.parse(use);
    if (!parsed)
      lc->fail("use", fmt::format("'{}' is not one of: {}", use, kJoinUseNames.choices()));
    o.lightcurves.use = *parsed;
    if (auto b = lc->get_string_list("bands")) o.lightcurves.bands = *b;
    o.lightcurves.periods = lc->bool_or("periods", true);
    o.lightcurves.warn_period_change =
        lc->number_or("warn_period_change", o.lightcurves.warn_period_change);
    if (!(o.lightcurves.warn_period_change > 0)) lc->fail("warn_period_change", "must be positive");
  }
  if (auto out = root.section("output")) {
    if (auto c = out->get_string("catalog")) o.catalog_path = config.resolve_path(*c);
    if (auto c = out->get_string("rejects_csv")) o.rejects_csv_path = config.resolve_path(*c);
  } else {
    o.catalog_path = config.resolve_path(o.catalog_path);
  }
  config.check_unknown_keys();
  throw_if_invalid(o.check(), config.file());
  return o;
}

IngestOptions ingest_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  return ingest_options_from_config(c);
}

std::string ingest_rejects_csv_path(const IngestOptions& o) {
  return o.rejects_csv_path.empty() ? path_beside(o.catalog_path, "_rejects.csv")
                                    : o.rejects_csv_path;
}

StageFiles declared_files(const IngestOptions& o) {
  StageFiles f;
  f.add_input(o.input_path);
  f.add_input(o.lightcurves.summary_path);
  f.outputs = {o.catalog_path, ingest_rejects_csv_path(o)};
  return f;
}

}  // namespace rungcal
