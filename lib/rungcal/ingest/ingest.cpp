// SPDX-License-Identifier: MIT
#include "rungcal/ingest/ingest.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <filesystem>
#include <memory>
#include <set>
#include <condition_variable>
#include <exception>
#include <functional>
#include <future>
#include <limits>
#include <mutex>
#include <string_view>
#include <thread>
#include <unordered_map>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/progress.hpp"
#include "rungcal/ingest/column_keys.hpp"
#include "rungcal/ingest/lightcurve_join.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/ecsv_io.hpp"
#include "rungcal/table/votable_io.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/table_source.hpp"
#include "rungcal/table/units.hpp"

namespace rungcal {
namespace {

// Built-in spellings of pulsation modes and classes found in published catalogs; a
// config's [modes] / [classes] tables add to them.
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

// A row that breaks a rule; caught per row and turned into a RejectedRow.
struct RowReject {
  std::string rule;
  std::string column;
  std::string message;
};

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

// Resolves a ValueSource against the input table: column pointer and unit conversion.
struct Resolved {
  std::string key;  // canonical key or band name, for messages
  const Column* column = nullptr;
  std::string column_name;
  UnitConversion conversion;
  std::optional<std::variant<double, std::string>> constant;
  bool present() const { return column || constant; }
};

// A rejected input row, kept until the duplicate-id check has run in file order.
struct RowRefusal {
  std::int64_t source_row = 0;
  std::string id;  // "" when the row has none
  RowReject reject;
};

// Two independent 64-bit hashes of an id (see IdRegistry).
struct IdHash {
  std::uint64_t a = 0, b = 0;
};

// A group of input rows mapped and checked: the accepted rows, and for every input row its
// place in the file, its fate and its id's hash, which the workers compute so that the
// settling thread only looks ids up.
struct RowGroup {
  StarTable rows;
  std::vector<std::int64_t> source_rows;
  std::vector<std::int64_t> fate;  // the row in `rows`, or -1 - its index in `refusals`
  std::vector<IdHash> id_hash;     // meaningful where the row has an id
  std::vector<RowRefusal> refusals;
  std::string row_label, id_column;
  std::size_t progress_units = 0;  // of the input taken by this group (GroupReader::next)
};

// Ids seen so far, with the source row of their first use. Open addressing over two
// independent 64-bit hashes of each id: 24 bytes a slot and one cache line per look-up,
// where a string-keyed map costs a node, a string and several cache misses per id (a
// million-row catalog). Two ids are taken as equal when both hashes agree: the chance
// that two different ids among n do is about n^2 / 2^129 (1e-27 for a million).
class IdRegistry {
 public:
  explicit IdRegistry(std::size_t expected) {
    std::size_t size = 1024;
    while (size < 2 * expected) size *= 2;
    slots_.assign(size, Slot{});
  }
  static IdHash hash(std::string_view id) {
    return {std::hash<std::string_view>{}(id), second_hash(id)};
  }
  // Starts loading the slot where h's search begins; a look-up soon after finds it cached.
  void prefetch(const IdHash& h) const { __builtin_prefetch(&slots_[h.a & (slots_.size() - 1)]); }
  // The row the id was first seen at; nothing (and the id is recorded at row) when new.
  std::optional<std::int64_t> first_seen(const IdHash& h, std::int64_t row) {
    if (2 * (count_ + 1) > slots_.size()) grow();
    for (std::size_t i = h.a & (slots_.size() - 1);; i = (i + 1) & (slots_.size() - 1)) {
      Slot& s = slots_[i];
      if (s.row == kEmpty) {
        s = {h.a, h.b, row};
        ++count_;
        return std::nullopt;
      }
      if (s.a == h.a && s.b == h.b) return s.row;
    }
  }

 private:
  static constexpr std::int64_t kEmpty = std::numeric_limits<std::int64_t>::min();
  struct Slot {
    std::uint64_t a = 0, b = 0;
    std::int64_t row = kEmpty;
  };
  // FNV-1a, finished with the splitmix64 mixer: independent of std::hash's Murmur.
  static std::uint64_t second_hash(std::string_view id) {
    std::uint64_t h = 0xcbf29ce484222325ull;
    for (unsigned char ch : id) h = (h ^ ch) * 0x100000001b3ull;
    h = (h ^ (h >> 30)) * 0xBF58476D1CE4E5B9ull;
    h = (h ^ (h >> 27)) * 0x94D049BB133111EBull;
    return h ^ (h >> 31);
  }
  void grow() {
    std::vector<Slot> old = std::move(slots_);
    slots_.assign(old.size() * 2, Slot{});
    for (const Slot& s : old)
      if (s.row != kEmpty)
        for (std::size_t i = s.a & (slots_.size() - 1);; i = (i + 1) & (slots_.size() - 1))
          if (slots_[i].row == kEmpty) {
            slots_[i] = s;
            break;
          }
  }
  std::vector<Slot> slots_;
  std::size_t count_ = 0;
};

std::string rejects_csv_path(const IngestOptions& o) {
  if (!o.rejects_csv_path.empty()) return o.rejects_csv_path;
  std::filesystem::path p(o.catalog_path);
  return (p.parent_path() / (p.stem().string() + "_rejects.csv")).string();
}

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

// The value of a numeric quantity in a row: nullopt when missing; RowReject when unusable.
std::optional<double> number_at(const Resolved& r, std::size_t row) {
  if (r.constant) {
    if (const double* d = std::get_if<double>(&*r.constant)) return *d;
    throw RowReject{"not_a_number", "",
                    fmt::format("{}: the constant given is not a number", r.key)};
  }
  if (!r.column || r.column->is_null(row)) return std::nullopt;
  double x = 0;
  switch (r.column->type) {
    case ColumnType::kReal:
      x = r.column->real[row];
      break;
    case ColumnType::kInteger:
      x = static_cast<double>(r.column->integer[row]);
      break;
    case ColumnType::kText:
      if (!parse_real(r.column->text[row], x))
        throw RowReject{"not_a_number", r.column_name,
                        fmt::format("{}: '{}' is not a number", r.key, r.column->text[row])};
      break;
    case ColumnType::kBoolean:
      x = r.column->boolean[row];
      break;
  }
  if (!std::isfinite(x))
    throw RowReject{"not_finite", r.column_name,
                    fmt::format("{}: value {} is not finite", r.key, x)};
  x = r.conversion.apply(x);
  if (!std::isfinite(x))
    throw RowReject{"not_finite", r.column_name,
                    fmt::format("{}: value is not finite after unit conversion", r.key)};
  return x;
}

// A numeric quantity's values over one group of rows, converted to canonical units column
// by column before the row checks: one pass over plain arrays instead of a type switch and
// a conversion per value. Where number_at would refuse a value, at() calls it, so a row is
// refused with the very rule, column and message number_at gives.
class PreparedNumbers {
 public:
  PreparedNumbers(const Resolved& r, std::size_t rows) : r_(&r), value_(rows), state_(rows) {
    if (r.constant) {
      const double* d = std::get_if<double>(&*r.constant);
      std::fill(state_.begin(), state_.end(), d ? kGood : kRefused);
      if (d) std::fill(value_.begin(), value_.end(), *d);
    } else if (!r.column) {
      std::fill(state_.begin(), state_.end(), kMissing);
    } else if (r.column->type == ColumnType::kReal) {
      prepare_reals(*r.column, r.conversion);
    } else {
      for (std::size_t i = 0; i < rows; ++i) prepare_one(i);
    }
  }
  std::optional<double> at(std::size_t row) const {
    if (state_[row] == kGood) return value_[row];
    if (state_[row] == kMissing) return std::nullopt;
    return number_at(*r_, row);  // throws the reject
  }
  // The value, or NaN where missing; only for rows whose at() returned.
  double value_or_nan(std::size_t row) const {
    return state_[row] == kGood ? value_[row] : std::numeric_limits<double>::quiet_NaN();
  }

 private:
  enum State : std::uint8_t { kGood, kMissing, kRefused };
  void prepare_reals(const Column& c, const UnitConversion& conv) {
    const std::size_t n = value_.size();
    const double* x = c.real.data();
    const std::uint8_t* missing = c.null.data();
    double* y = value_.data();
    std::uint8_t* state = state_.data();
    if (conv.log10_input) {
      for (std::size_t i = 0; i < n; ++i) y[i] = conv.apply(x[i]);
    } else {
      const double scale = conv.scale;
      for (std::size_t i = 0; i < n; ++i) y[i] = scale * x[i];
    }
    for (std::size_t i = 0; i < n; ++i) {
      const bool finite = std::isfinite(x[i]) && std::isfinite(y[i]);
      state[i] = missing[i] ? kMissing : finite ? kGood : kRefused;
    }
  }
  void prepare_one(std::size_t row) {
    try {
      auto v = number_at(*r_, row);
      state_[row] = v ? kGood : kMissing;
      value_[row] = v.value_or(0.0);
    } catch (const RowReject&) {
      state_[row] = kRefused;
    }
  }
  const Resolved* r_;
  std::vector<double> value_;
  std::vector<std::uint8_t> state_;
};

// The text of a quantity in a row (a number formatted as the file or config gives it),
// without a copy where the table or the config holds it: nullptr when missing; scratch holds a
// formatted number.
const std::string* text_ref(const Resolved& r, std::size_t row, std::string& scratch) {
  if (r.constant) {
    if (const auto* s = std::get_if<std::string>(&*r.constant)) return s;
    scratch = fmt::format("{}", std::get<double>(*r.constant));
    return &scratch;
  }
  if (!r.column || r.column->is_null(row)) return nullptr;
  if (r.column->type == ColumnType::kText) return &r.column->text[row];
  scratch = r.column->to_string(row);
  return &scratch;
}

// Output columns filled for the accepted input rows at once, column by column.
template <class ValueAt>
void fill_reals(Column& out, std::size_t n, const ValueAt& value) {
  out.resize(n);
  for (std::size_t k = 0; k < n; ++k) {
    const double v = value(k);
    out.real[k] = v;
    out.null[k] = std::isnan(v) ? 1 : 0;  // as push_real: NaN is a null
  }
}
template <class TextAt>
void fill_texts(Column& out, std::size_t n, const TextAt& value) {
  out.resize(n);
  for (std::size_t k = 0; k < n; ++k) {
    const std::string* v = value(k);
    if (v) out.text[k] = *v;
    out.null[k] = v ? 0 : 1;
  }
}
void fill_selected(Column& out, const Column& src, const std::vector<std::size_t>& rows) {
  out.resize(rows.size());  // every row null, as push_null leaves it
  for (std::size_t k = 0; k < rows.size(); ++k) {
    const std::size_t r = rows[k];
    if (src.null[r]) continue;
    switch (src.type) {
      case ColumnType::kReal:
        if (std::isnan(src.real[r])) continue;  // as push_real: NaN is a null
        out.real[k] = src.real[r];
        break;
      case ColumnType::kInteger:
        out.integer[k] = src.integer[r];
        break;
      case ColumnType::kText:
        out.text[k] = src.text[r];
        break;
      case ColumnType::kBoolean:
        out.boolean[k] = src.boolean[r] != 0;
        break;
    }
    out.null[k] = 0;
  }
}

bool compare(double a, SelectOp op, double b) {
  switch (op) {
    case SelectOp::kEqual:
      return a == b;
    case SelectOp::kNotEqual:
      return a != b;
    case SelectOp::kLess:
      return a < b;
    case SelectOp::kLessEqual:
      return a <= b;
    case SelectOp::kGreater:
      return a > b;
    case SelectOp::kGreaterEqual:
      return a >= b;
  }
  return false;
}

bool select_row(const SelectRule& rule, const Column& c, std::size_t row) {
  if (c.is_null(row)) return false;
  if (const double* v = std::get_if<double>(&rule.value)) {
    double x = c.as_real(row);
    if (c.type == ColumnType::kText && !parse_real(c.text[row], x)) return false;
    return compare(x, rule.op, *v);
  }
  const std::string& v = std::get<std::string>(rule.value);
  std::string x = c.to_string(row);
  int cmp = x.compare(v);
  return compare(cmp, rule.op, 0);
}

std::int64_t canonical_astrometric_params(double x) {
  // Gaia's astrometric_params_solved is a bit mask: 31 = 5-parameter, 95 = 6-parameter.
  if (x == 31) return 5;
  if (x == 95) return 6;
  if (x == 3) return 2;
  if (x == 2 || x == 5 || x == 6) return static_cast<std::int64_t>(x);
  throw RowReject{"bad_astrometric_params", "",
                  fmt::format("astrometric parameters {} is not 2, 5, 6 (or Gaia's 3, 31, 95)", x)};
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

std::string IngestOptions::check() const {
  if (input_path.empty()) return "source.path: required";
  if (catalog_path.empty()) return "output.catalog: required";
  if (chunk_rows < 1) return "source.chunk_rows: must be at least 1";
  if (!quantities.count("id"))
    return "columns.id: required (which input column identifies each star)";
  if (!quantities.count("period"))
    return "columns.period: required (a period or log-period column)";
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
    const std::string unit_policy = v->string_or("unit_checks", "refuse");
    auto policy = kUnitCheckPolicyNames.parse(unit_policy);
    if (!policy)
      v->fail("unit_checks",
              fmt::format("'{}' is not one of: {}", unit_policy, kUnitCheckPolicyNames.choices()));
    o.unit_checks.policy = *policy;
    PlausibleRange plx{o.unit_checks.parallax_median_min_mas, o.unit_checks.parallax_median_max_mas};
    range(*v, "parallax_median_range_mas", plx);
    o.unit_checks.parallax_median_min_mas = plx.min;
    o.unit_checks.parallax_median_max_mas = plx.max;
    if (auto by_class = v->section("class_period_median_range_d"))
      for (const auto& cls : by_class->keys()) {
        if (!kPulsatorClassNames.parse(cls))
          by_class->fail(cls, fmt::format("not a pulsator class (known: {})",
                                          kPulsatorClassNames.choices()));
        PlausibleRange r;
        range(*by_class, cls, r);
        o.unit_checks.class_period_median_d[cls] = {r.min, r.max};
      }
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

StarTable IngestResult::rejects_table() const {
  StarTable t;
  t.add_column("source_row", ColumnType::kInteger, "", "line (text) or row (FITS) in the input");
  t.add_column("id", ColumnType::kText);
  t.add_column("rule", ColumnType::kText, "", "rule the row broke");
  t.add_column("column", ColumnType::kText, "", "input column involved");
  t.add_column("message", ColumnType::kText);
  for (const auto& r : rejected) {
    t.column("source_row").push_integer(r.source_row);
    r.id.empty() ? t.column("id").push_null() : t.column("id").push_text(r.id);
    t.column("rule").push_text(r.rule);
    r.column.empty() ? t.column("column").push_null() : t.column("column").push_text(r.column);
    t.column("message").push_text(r.message);
  }
  return t;
}

namespace {

// An input group's columns resolved against the config. Resolving comes before any row is
// read: a mapping error stops the whole file.
struct GroupMapping {
  struct Band {
    std::string band;
    Resolved mag, err;
  };
  std::map<std::string, Resolved> quantities;
  std::vector<Band> bands;
  std::vector<const Column*> select_columns, extra_columns;
  const Resolved& at(const std::string& key) const { return quantities.at(key); }
};

GroupMapping resolve_group(const IngestOptions& o, const SourceTable& in) {
  GroupMapping m;
  for (const auto& [k, src] : o.quantities)
    m.quantities[k] = resolve(src, k, find_quantity(k)->kind, in, o);
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

// The mapped parallaxes and periods (by class) of one group of rows, in canonical units and
// before any row rule, for the unit checks (unit_sanity.hpp).
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
  const Resolved& period = m.at("period");
  if (period.column) {
    s.period_column = period.column_name;
    s.period_unit = unit_of("period", period);
    const Resolved& cls = m.at("pulsator_class");
    std::string scratch;
    for (std::size_t r = 0; r < n; ++r) {
      auto v = value(period, r);
      const std::string* text = text_ref(cls, r, scratch);
      if (!v || !text) continue;
      std::string c = canonical_choice(*text, o.class_aliases, builtin_class_aliases(), false);
      if (!c.empty()) s.period_d_by_class[c].push_back(*v);
    }
  }
  return s;
}

// The catalog's columns (a schema without rows) and where each kind of value goes in it.
struct CatalogLayout {
  StarTable schema;
  std::size_t id = 0, source_row = 0, period = 0, log_period = 0;
  std::map<std::string, std::size_t> quantities;           // the other mapped quantities
  std::vector<std::pair<std::size_t, std::size_t>> bands;  // magnitude, error
  std::vector<std::size_t> extras;
};

// Fixed columns first, then the mapped quantities in the schema's order, bands and extras.
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
    if (k == "id" || k == "period" || !m.quantities.count(k)) continue;
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

// What an accepted row adds to the numbers already prepared: its canonical mode and class
// and its astrometric parameters.
struct AcceptedRow {
  std::size_t input_row = 0;
  const std::string* mode = nullptr;
  const std::string* pulsator_class = nullptr;
  std::optional<std::int64_t> astrometric;
};

// The row checks of one group. Numbers are converted column by column when it is made;
// check() then takes each row through the rules in a fixed order.
class GroupChecks {
 public:
  GroupChecks(const IngestOptions& o, const GroupMapping& m, std::size_t rows)
      : o_(o),
        m_(m),
        q_id_(m.at("id")),
        q_period_(m.at("period")),
        q_mode_(m.at("mode")),
        q_class_(m.at("pulsator_class")),
        periods_(q_period_, rows) {
    for (const auto& [k, res] : m.quantities) {
      if (find_quantity(k)->type == ColumnType::kText || k == "period") continue;
      slot_of_[k] = static_cast<int>(numbers_.size());
      numbers_.emplace_back(res, rows);
    }
    values_.resize(numbers_.size());
    for (const auto& b : m.bands) {
      band_mags_.emplace_back(b.mag, rows);
      band_errs_.emplace_back(b.err, rows);
    }
    for (const char* k : {"ebv_err", "feh_err", "mu_err", "period_err"})
      if (slot(k) >= 0) error_slots_.emplace_back(k, slot(k));
    s_parallax_ = slot("parallax");
    s_parallax_err_ = slot("parallax_err");
    s_ebv_ = slot("ebv");
    s_astrometric_ = slot("astrometric_params");
    s_feh_ = slot("feh");
  }

  // Checks row r; throws the first rule it breaks as a RowReject. id is set as soon as the
  // row's id is known, for the reject.
  AcceptedRow check(std::size_t r, const std::string*& id) {
    id = text_ref(q_id_, r, id_scratch_);
    if (!id || id->empty())
      throw RowReject{"missing_required", q_id_.column_name, "the star has no id"};
    check_period(r);
    for (std::size_t s = 0; s < o_.selection.size(); ++s)
      if (!select_row(o_.selection[s], *m_.select_columns[s], r))
        throw RowReject{"selection", o_.selection[s].column,
                        "fails the selection " + o_.selection[s].describe()};
    AcceptedRow row;
    row.input_row = r;
    row.mode = &canonical(true, r);
    row.pulsator_class = &canonical(false, r);
    check_period_plausible(r, *row.pulsator_class);
    for (std::size_t i = 0; i < numbers_.size(); ++i) values_[i] = numbers_[i].at(r);
    check_errors();
    check_plausible();
    row.astrometric = astrometric_params();
    check_photometry(r);
    return row;
  }

  const PreparedNumbers& periods() const { return periods_; }
  const PreparedNumbers& number(const std::string& key) const {
    return numbers_[static_cast<std::size_t>(slot_of_.at(key))];
  }
  const PreparedNumbers& band_magnitude(std::size_t b) const { return band_mags_[b]; }
  const PreparedNumbers& band_error(std::size_t b) const { return band_errs_[b]; }

 private:
  int slot(const char* k) const {
    auto it = slot_of_.find(k);
    return it == slot_of_.end() ? -1 : it->second;
  }
  std::optional<double> value(int slot) const {
    return slot < 0 ? std::nullopt : values_[static_cast<std::size_t>(slot)];
  }

  void check_period(std::size_t r) const {
    const Resolved& q = q_period_;
    auto period = periods_.at(r);
    if (!period) throw RowReject{"missing_required", q.column_name, "the star has no period"};
    if (*period <= 0)
      throw RowReject{"period_nonpositive", q.column_name,
                      fmt::format("period {} d is not positive", *period)};
  }

  // The period against the plausible range of the star's class (issue 15: 1e308, 1e30 and
  // 1e-300 d reached the fit and crashed it).
  void check_period_plausible(std::size_t r, const std::string& pulsator_class) const {
    auto it = o_.class_period_range.find(pulsator_class);
    const PlausibleRange& range = it == o_.class_period_range.end() ? o_.period_range : it->second;
    const double p = *periods_.at(r);
    if (!range.contains(p))
      throw RowReject{
          "period_out_of_range", q_period_.column_name,
          fmt::format("period {} d is outside the plausible [{}, {}] d for {} ([validate] "
                      "period_range_d)",
                      p, range.min, range.max, pulsator_class)};
  }

  // Parallax, its error and [Fe/H] against their plausible ranges ([validate]).
  void check_plausible() const {
    if (auto p = value(s_parallax_); p && !(std::abs(*p) <= o_.parallax_abs_max))
      throw RowReject{"parallax_out_of_range", m_.at("parallax").column_name,
                      fmt::format("parallax {} mas is beyond the plausible +-{} mas ([validate] "
                                  "parallax_max_mas)",
                                  *p, o_.parallax_abs_max)};
    if (auto e = value(s_parallax_err_); e && !(*e <= o_.parallax_err_max))
      throw RowReject{"parallax_error_out_of_range", m_.at("parallax_err").column_name,
                      fmt::format("parallax error {} mas is above the plausible {} mas ([validate] "
                                  "parallax_error_max_mas)",
                                  *e, o_.parallax_err_max)};
    if (auto f = value(s_feh_); f && !o_.feh_range.contains(*f))
      throw RowReject{
          "feh_out_of_range", m_.at("feh").column_name,
          fmt::format("[Fe/H] = {} is outside the plausible [{}, {}] ([validate] feh_range)", *f,
                      o_.feh_range.min, o_.feh_range.max)};
  }

  // The canonical mode (or class) of row r. Spellings repeat from row to row: each distinct
  // one is looked up once per group.
  const std::string& canonical(bool is_mode, std::size_t r) {
    const Resolved& q = is_mode ? q_mode_ : q_class_;
    const std::string* text = text_ref(q, r, is_mode ? mode_scratch_ : class_scratch_);
    if (!text)
      throw RowReject{
          "missing_required", q.column_name,
          is_mode ? "the star has no pulsation mode" : "the star has no pulsator class"};
    auto& cache = is_mode ? mode_of_ : class_of_;
    auto it = cache.find(*text);
    if (it == cache.end())
      it = cache
               .emplace(*text, is_mode ? canonical_choice(*text, o_.mode_aliases,
                                                          builtin_mode_aliases(), true)
                                       : canonical_choice(*text, o_.class_aliases,
                                                          builtin_class_aliases(), false))
               .first;
    if (it->second.empty()) {
      if (is_mode)
        throw RowReject{"unknown_mode", q.column_name,
                        fmt::format("mode '{}' is unknown (map it in [modes]; known: {})", *text,
                                    kPulsationModeNames.choices())};
      throw RowReject{"unknown_class", q.column_name,
                      fmt::format("class '{}' is unknown (map it in [classes]; known: {})", *text,
                                  kPulsatorClassNames.choices())};
    }
    return it->second;
  }

  void check_errors() const {
    if (value(s_parallax_)) {
      auto e = value(s_parallax_err_);
      if (!e && o_.require_errors)
        throw RowReject{
            "missing_error",
            m_.quantities.count("parallax_err") ? m_.at("parallax_err").column_name : "",
            "a parallax without its error"};
      if (e && !(*e > 0))
        throw RowReject{"parallax_error_nonpositive", m_.at("parallax_err").column_name,
                        fmt::format("parallax error {} mas is not positive", *e)};
    }
    if (auto e = value(s_ebv_); e && (*e < o_.ebv_min || *e > o_.ebv_max))
      throw RowReject{"ebv_out_of_range", m_.at("ebv").column_name,
                      fmt::format("E(B-V) = {} is outside [{}, {}]", *e, o_.ebv_min, o_.ebv_max)};
    for (const auto& [k, i] : error_slots_)
      if (auto e = values_[static_cast<std::size_t>(i)]; e && *e < 0)
        throw RowReject{"error_negative", m_.at(k).column_name,
                        fmt::format("{} = {} is negative", k, *e)};
  }

  std::optional<std::int64_t> astrometric_params() const {
    auto a = value(s_astrometric_);
    if (!a) return std::nullopt;
    try {
      return canonical_astrometric_params(*a);
    } catch (RowReject& rr) {
      rr.column = m_.at("astrometric_params").column_name;
      throw;
    }
  }

  void check_photometry(std::size_t r) const {
    bool any_mag = false;
    for (std::size_t b = 0; b < m_.bands.size(); ++b) {
      const auto& band = m_.bands[b];
      const std::optional<double> mag = band_mags_[b].at(r);
      const std::optional<double> err = band_errs_[b].at(r);  // missing when none is mapped
      if (!mag) continue;
      any_mag = true;
      if (*mag < o_.magnitude_min || *mag > o_.magnitude_max)
        throw RowReject{"magnitude_out_of_range", band.mag.column_name,
                        fmt::format("{} = {} mag is outside [{}, {}]", band.band, *mag,
                                    o_.magnitude_min, o_.magnitude_max)};
      if (!err && o_.require_errors)
        throw RowReject{"missing_error", band.err.column_name,
                        fmt::format("{} magnitude without its error", band.band)};
      if (err && !(*err > 0))
        throw RowReject{"magnitude_error_nonpositive", band.err.column_name,
                        fmt::format("{} error {} mag is not positive", band.band, *err)};
      if (err && !(*err <= o_.magnitude_err_max))
        throw RowReject{"magnitude_error_out_of_range", band.err.column_name,
                        fmt::format("{} error {} mag is above the plausible {} mag ([validate] "
                                    "magnitude_error_max)",
                                    band.band, *err, o_.magnitude_err_max)};
    }
    // With a light-curve join the rule waits for the join (refuse_stars_without_photometry).
    if (!any_mag && o_.lightcurves.summary_path.empty())
      throw RowReject{"no_photometry", "", "the star has no magnitude in any configured band"};
  }

  const IngestOptions& o_;
  const GroupMapping& m_;
  const Resolved &q_id_, &q_period_, &q_mode_, &q_class_;  // looked up once, used every row
  PreparedNumbers periods_;
  std::vector<PreparedNumbers> numbers_;  // the numeric quantities but the period
  std::map<std::string, int> slot_of_;    // quantity -> index in numbers_
  std::vector<PreparedNumbers> band_mags_, band_errs_;
  std::vector<std::pair<std::string, int>> error_slots_;
  int s_parallax_ = -1, s_parallax_err_ = -1, s_ebv_ = -1, s_astrometric_ = -1,
      s_feh_ = -1;                             // -1: unmapped
  std::vector<std::optional<double>> values_;  // the row's numbers, by slot
  std::unordered_map<std::string, std::string> mode_of_, class_of_;
  std::string id_scratch_, mode_scratch_, class_scratch_;
};

// The accepted rows' values, written into a copy of the layout's schema column by column.
StarTable catalog_rows(const CatalogLayout& l, const GroupMapping& m, const GroupChecks& checks,
                       const std::vector<AcceptedRow>& accepted, const SourceTable& in) {
  StarTable table = l.schema;
  const std::size_t n = accepted.size();
  std::vector<std::size_t> rows(n);
  for (std::size_t k = 0; k < n; ++k) rows[k] = accepted[k].input_row;
  std::string scratch;
  auto text_of = [&](const Resolved& q) {
    return [&rows, &scratch, q = &q](std::size_t k) { return text_ref(*q, rows[k], scratch); };
  };
  auto number_of = [&](const PreparedNumbers& p) {
    return [&rows, p = &p](std::size_t k) { return p->value_or_nan(rows[k]); };
  };
  fill_texts(table.column(l.id), n, text_of(m.at("id")));
  Column& source_row = table.column(l.source_row);
  source_row.resize(n);
  for (std::size_t k = 0; k < n; ++k) {
    source_row.integer[k] = in.source_rows[rows[k]];
    source_row.null[k] = 0;
  }
  fill_reals(table.column(l.period), n, number_of(checks.periods()));
  fill_reals(table.column(l.log_period), n,
             [&](std::size_t k) { return std::log10(checks.periods().value_or_nan(rows[k])); });
  for (const auto& [key, i] : l.quantities) {
    Column& out = table.column(i);
    if (key == "mode") {
      fill_texts(out, n, [&](std::size_t k) { return accepted[k].mode; });
    } else if (key == "pulsator_class") {
      fill_texts(out, n, [&](std::size_t k) { return accepted[k].pulsator_class; });
    } else if (find_quantity(key)->type == ColumnType::kText) {
      fill_texts(out, n, text_of(m.at(key)));
    } else if (key == "astrometric_params") {
      out.resize(n);
      for (std::size_t k = 0; k < n; ++k) {
        out.integer[k] = accepted[k].astrometric.value_or(0);
        out.null[k] = accepted[k].astrometric ? 0 : 1;
      }
    } else {
      fill_reals(out, n, number_of(checks.number(key)));
    }
  }
  for (std::size_t b = 0; b < l.bands.size(); ++b) {
    const PreparedNumbers& mag = checks.band_magnitude(b);
    const PreparedNumbers& err = checks.band_error(b);
    fill_reals(table.column(l.bands[b].first), n, number_of(mag));
    // An error is kept only beside its magnitude.
    fill_reals(table.column(l.bands[b].second), n, [&](std::size_t k) {
      return std::isnan(mag.value_or_nan(rows[k])) ? std::numeric_limits<double>::quiet_NaN()
                                                   : err.value_or_nan(rows[k]);
    });
  }
  for (std::size_t i = 0; i < l.extras.size(); ++i)
    fill_selected(table.column(l.extras[i]), *m.extra_columns[i], rows);
  return table;
}

// Maps and checks one group of input rows: the accepted rows in the catalog's columns, and
// every row's fate and id hash for settling in file order.
RowGroup check_group(const IngestOptions& o, const SourceTable& in, const CatalogLayout& layout) {
  const GroupMapping mapping = resolve_group(o, in);
  const std::size_t rows_in = in.table.rows();
  GroupChecks checks(o, mapping, rows_in);
  RowGroup group;
  group.row_label = in.row_label;
  group.id_column = mapping.at("id").column_name;
  group.source_rows.assign(in.source_rows.begin(),
                           in.source_rows.begin() + static_cast<std::ptrdiff_t>(rows_in));
  group.fate.resize(rows_in);
  std::vector<AcceptedRow> accepted;
  accepted.reserve(rows_in);
  for (std::size_t r = 0; r < rows_in; ++r) {
    const std::string* id = nullptr;
    try {
      accepted.push_back(checks.check(r, id));
      group.fate[r] = static_cast<std::int64_t>(accepted.size()) - 1;
    } catch (const RowReject& rej) {
      group.fate[r] = -1 - static_cast<std::int64_t>(group.refusals.size());
      group.refusals.push_back({in.source_rows[r], id ? *id : std::string(), rej});
    }
  }
  group.rows = catalog_rows(layout, mapping, checks, accepted, in);
  // Ids hashed here, on the worker, so that settling them in file order is only look-ups.
  group.id_hash.resize(rows_in);
  const auto& ids = group.rows.column(layout.id).text;
  for (std::size_t r = 0; r < rows_in; ++r) {
    const std::int64_t f = group.fate[r];
    const std::string& id = f >= 0 ? ids[static_cast<std::size_t>(f)]
                                   : group.refusals[static_cast<std::size_t>(-1 - f)].id;
    if (!id.empty()) group.id_hash[r] = IdRegistry::hash(id);
  }
  return group;
}

// The input's groups of rows, in file order: a FITS table or a text table, read a group
// at a time so that a large catalog never sits in memory whole.
class GroupReader {
 public:
  explicit GroupReader(const IngestOptions& o)
      : o_(o), chunk_(static_cast<std::size_t>(o.chunk_rows)) {
    if (o.input_is_fits)
      fits_ = std::make_unique<FitsTableReader>(o.input_path, o.hdu);
    else if (o.input_is_votable)
      ecsv_ = std::make_unique<SourceTable>(read_votable_table(o.input_path));  // read whole
    else if (looks_like_ecsv(o.input_path))
      ecsv_ = std::make_unique<SourceTable>(read_ecsv_table(o.input_path));  // read whole
    else
      text_ = std::make_unique<TextTableReader>(o.input_path, o.text);
  }
  // The next group; no rows at the end. progress_units: rows (FITS) or bytes (text) taken.
  SourceTable next(std::size_t& progress_units) {
    if (ecsv_) {
      const std::size_t rows = ecsv_->table.rows();
      const std::size_t end = std::min(rows, next_row_ + chunk_);
      progress_units = end - next_row_;
      if (next_row_ >= rows) return SourceTable{};
      std::vector<std::size_t> picked(end - next_row_);
      for (std::size_t i = 0; i < picked.size(); ++i) picked[i] = next_row_ + i;
      SourceTable g;
      g.file = ecsv_->file;
      g.row_label = ecsv_->row_label;
      g.unusable_columns = ecsv_->unusable_columns;
      g.table = ecsv_->table.select_rows(picked);
      g.source_rows.assign(ecsv_->source_rows.begin() + static_cast<std::ptrdiff_t>(next_row_),
                           ecsv_->source_rows.begin() + static_cast<std::ptrdiff_t>(end));
      next_row_ = end;
      return g;
    }
    if (fits_) {
      const auto rows = static_cast<std::size_t>(fits_->rows());
      if (next_row_ >= rows) {
        progress_units = 0;
        return SourceTable{};
      }
      SourceTable g = fits_->read(static_cast<std::int64_t>(next_row_), o_.chunk_rows);
      next_row_ += g.table.rows();
      progress_units = g.table.rows();
      return g;
    }
    const std::uint64_t before = text_->bytes_read();
    SourceTable g = text_->read(chunk_);
    progress_units = static_cast<std::size_t>(text_->bytes_read() - before);
    return g;
  }
  // All the progress units, and the rows to expect: a FITS table's own count, or a text
  // file's size over the bytes per line of the groups read so far.
  std::size_t progress_total() const {
    if (ecsv_) return ecsv_->table.rows();
    return fits_ ? static_cast<std::size_t>(fits_->rows())
                 : static_cast<std::size_t>(text_->file_bytes());
  }
  std::size_t expected_rows(std::size_t rows_so_far) const {
    if (ecsv_) return ecsv_->table.rows();
    if (fits_) return static_cast<std::size_t>(fits_->rows());
    const std::uint64_t read = text_->bytes_read(), all = text_->file_bytes();
    if (rows_so_far == 0 || read == 0 || read >= all) return rows_so_far;
    return static_cast<std::size_t>(static_cast<double>(rows_so_far) * static_cast<double>(all) /
                                    static_cast<double>(read) * 1.02) +
           1;
  }
  const char* row_label() const { return fits_ ? "row" : "line"; }  // ECSV: line
  const char* no_rows_message() const {
    return fits_ ? "the table has no rows" : "the table has no data rows";
  }

 private:
  const IngestOptions& o_;
  std::size_t chunk_;
  std::unique_ptr<FitsTableReader> fits_;
  std::unique_ptr<TextTableReader> text_;
  std::unique_ptr<SourceTable> ecsv_;  // an ECSV or VOTable table, read whole
  std::size_t next_row_ = 0;
};

// The offset of the first byte of s that breaks UTF-8 (RFC 3629: no overlong forms, no
// surrogates, nothing above U+10FFFF), or npos when s is well-formed.
std::size_t first_invalid_utf8(std::string_view s) {
  std::size_t i = 0;
  while (i < s.size()) {
    const auto b = static_cast<unsigned char>(s[i]);
    if (b < 0x80) {
      ++i;
      continue;
    }
    // Well-formed sequences by their first byte (RFC 3629, section 4): how many bytes follow
    // and the range of the second; the rest are 0x80..0xBF.
    struct Lead {
      unsigned first_lo, first_hi, follow, second_lo, second_hi;
    };
    static constexpr Lead kLeads[] = {{0xC2, 0xDF, 1, 0x80, 0xBF}, {0xE0, 0xE0, 2, 0xA0, 0xBF},
                                      {0xE1, 0xEC, 2, 0x80, 0xBF}, {0xED, 0xED, 2, 0x80, 0x9F},
                                      {0xEE, 0xEF, 2, 0x80, 0xBF}, {0xF0, 0xF0, 3, 0x90, 0xBF},
                                      {0xF1, 0xF3, 3, 0x80, 0xBF}, {0xF4, 0xF4, 3, 0x80, 0x8F}};
    const Lead* lead = nullptr;
    for (const Lead& l : kLeads)
      if (b >= l.first_lo && b <= l.first_hi) lead = &l;
    if (!lead) return i;
    const std::size_t n = lead->follow;
    const unsigned lo = lead->second_lo, hi = lead->second_hi;
    for (std::size_t k = 1; k <= n; ++k) {
      if (i + k >= s.size()) return i;
      const auto c = static_cast<unsigned char>(s[i + k]);
      if (c < (k == 1 ? lo : 0x80) || c > (k == 1 ? hi : 0xBF)) return i;
    }
    i += n + 1;
  }
  return std::string_view::npos;
}

// An id with the spaces around it cut and ASCII letters in lower case: two ids with the
// same folded form are most likely one star written twice.
std::string folded_id(std::string_view id) {
  const auto first = id.find_first_not_of(" \t");
  if (first == std::string_view::npos) return {};
  const auto last = id.find_last_not_of(" \t");
  std::string out(id.substr(first, last - first + 1));
  for (char& c : out)
    if (c >= 'A' && c <= 'Z') c = static_cast<char>(c - 'A' + 'a');
  return out;
}

// Takes the settled groups' accepted rows, in file order, with the rows to expect in all.
using GroupSink = std::function<void(StarTable&&, std::size_t expected_rows)>;

// Reads, maps and checks the input group by group (FITS groups on every core, one cfitsio
// read at a time), settles each group's duplicate ids in file order and hands its accepted
// rows to sink in file order. Fills the rest of result; returns the catalog's columns and
// header without rows.
StarTable ingest_groups(const IngestOptions& o, IngestResult& result, const GroupSink& sink) {
  throw_if_invalid(o.check(), o.config_file);
  GroupReader input(o);
  std::size_t first_units = 0;
  SourceTable first_chunk = input.next(first_units);
  if (first_chunk.table.rows() == 0)
    throw InputError({o.input_path, {}, {}}, "empty_file", input.no_rows_message());
  std::size_t rows_read = first_chunk.table.rows();
  const std::size_t expected = input.expected_rows(rows_read);

  result.provenance = Provenance::for_stage("ingest");
  result.provenance.config_sha256 = o.config_sha256;
  // The input's hash for provenance, on its own thread while the rows are mapped.
  auto input_hash =
      std::async(std::launch::async, [path = o.input_path] { return sha256_file(path); });

  // The catalog's columns, made from the first group of rows (before any worker starts);
  // each group fills a copy.
  std::optional<CatalogLayout> layout;
  auto process = [&](const SourceTable& in) {
    if (!layout) {
      // The first group (chunk_rows rows) is the sample the unit checks look at.
      const GroupMapping mapping = resolve_group(o, in);
      apply_unit_checks(unit_sample(o, mapping, in), o.unit_checks);
      layout = make_catalog_layout(o, mapping);
    }
    return check_group(o, in, *layout);
  };
  IdRegistry ids(expected);
  IdRegistry folded_ids(expected);  // ids folded (folded_id): variants of one id
  std::size_t kept = 0;
  // Drawn on a terminal only: a nightly run under cron stays quiet.
  Progress progress("ingest " + std::filesystem::path(o.input_path).filename().string(),
                    input.progress_total());
  auto settle = [&](RowGroup&& g) {
    std::vector<std::size_t> keep;
    keep.reserve(g.rows.rows());
    bool dropped = false;
    const auto& accepted_ids = g.rows.column(layout->id).text;
    // How far ahead the registry's slots are loaded: about one memory latency of look-ups.
    constexpr std::size_t kPrefetchAhead = 16;
    const std::size_t count = g.fate.size();
    for (std::size_t r = 0; r < count; ++r) {
      if (r + kPrefetchAhead < count) ids.prefetch(g.id_hash[r + kPrefetchAhead]);
      const std::int64_t f = g.fate[r];
      const std::string& id = f >= 0 ? accepted_ids[static_cast<std::size_t>(f)]
                                     : g.refusals[static_cast<std::size_t>(-1 - f)].id;
      if (!id.empty()) {
        // Ids go to JSON and FITS text: a byte that is not UTF-8 stops the file here (it
        // was an internal error later, in the fit, issue 15).
        if (const std::size_t bad = first_invalid_utf8(id); bad != std::string_view::npos)
          throw InputError({o.input_path, g.source_rows[r], g.id_column, g.row_label},
                           "invalid_utf8",
                           fmt::format("the star id is not valid UTF-8: byte {} is 0x{:02X}",
                                       bad + 1, static_cast<unsigned char>(id[bad])));
        if (auto first = ids.first_seen(g.id_hash[r], g.source_rows[r])) {
          result.rejected.push_back(
              {g.source_rows[r], id, "duplicate_id", g.id_column,
               fmt::format("id '{}' was already used at {} {}", id, g.row_label, *first)});
          dropped = dropped || f >= 0;
          continue;
        }
        if (auto first = folded_ids.first_seen(IdRegistry::hash(folded_id(id)), g.source_rows[r])) {
          const std::string message =
              fmt::format("id '{}' equals the id at {} {} but for letter case or spaces around it",
                          id, g.row_label, *first);
          if (o.id_variants == IdVariantPolicy::kRefuse) {
            result.rejected.push_back({g.source_rows[r], id, "id_variant", g.id_column, message});
            dropped = dropped || f >= 0;
            continue;
          }
          spdlog::warn("{}: {} {}: {} (refused with [validate] id_variants = \"refuse\")",
                       o.input_path, g.row_label, g.source_rows[r], message);
        }
      }
      if (f >= 0) {
        keep.push_back(static_cast<std::size_t>(f));
      } else {
        RowRefusal& refusal = g.refusals[static_cast<std::size_t>(-1 - f)];
        result.rejected.push_back({refusal.source_row, std::move(refusal.id),
                                   std::move(refusal.reject.rule), std::move(refusal.reject.column),
                                   std::move(refusal.reject.message)});
      }
    }
    if (dropped) g.rows = g.rows.select_rows(keep);
    kept += g.rows.rows();
    sink(std::move(g.rows), expected);
    progress.advance(g.progress_units);
  };
  {
    RowGroup first = process(first_chunk);
    first.progress_units = first_units;
    first_chunk = SourceTable{};
    settle(std::move(first));
  }
  // Workers read groups in file order (one read at a time) and check them; this thread
  // settles them in that order and hands them on (writing, when streaming) meanwhile.
  std::mutex read_mutex, mutex;
  std::condition_variable changed;
  std::map<std::size_t, RowGroup> done;  // checked groups waiting to be settled
  std::size_t next = 1;                  // the next group to settle
  std::size_t next_read = 1;             // the group the next read makes
  std::optional<std::size_t> groups;     // known once a read finds the end
  bool failed = false;
  std::exception_ptr worker_error;
  const int threads = worker_threads(0);
  // Groups read past the next to settle, at most: memory stays a few groups.
  const auto ahead = static_cast<std::size_t>(threads) + 1;
  auto work = [&] {
    try {
      while (true) {
        {
          std::unique_lock lock(mutex);
          changed.wait(lock, [&] { return failed || groups || next_read < next + ahead; });
          if (failed || groups) return;
        }
        SourceTable in;
        std::size_t g = 0, units = 0;
        {
          std::lock_guard lock(read_mutex);
          {
            std::lock_guard state(mutex);
            if (groups) return;
          }
          in = input.next(units);
          std::lock_guard state(mutex);
          if (in.table.rows() == 0) {
            groups = next_read;
            changed.notify_all();
            return;
          }
          g = next_read++;
        }
        RowGroup rows = process(in);
        rows.progress_units = units;
        std::lock_guard lock(mutex);
        rows_read += in.table.rows();
        done.emplace(g, std::move(rows));
        changed.notify_all();
      }
    } catch (...) {
      std::lock_guard lock(mutex);
      if (!worker_error) worker_error = std::current_exception();
      failed = true;
      changed.notify_all();
    }
  };
  std::vector<std::thread> workers;
  for (int t = 0; t < threads; ++t) workers.emplace_back(work);
  auto join_workers = [&] {
    for (auto& w : workers) w.join();
  };
  try {
    while (true) {
      RowGroup rows;
      {
        std::unique_lock lock(mutex);
        changed.wait(lock,
                     [&] { return failed || (groups && next >= *groups) || done.count(next); });
        if (failed || (groups && next >= *groups && !done.count(next))) break;
        auto it = done.find(next);
        rows = std::move(it->second);
        done.erase(it);
      }
      settle(std::move(rows));
      std::lock_guard lock(mutex);
      ++next;
      changed.notify_all();
    }
  } catch (...) {
    {
      std::lock_guard lock(mutex);
      failed = true;
      changed.notify_all();
    }
    join_workers();
    throw;
  }
  join_workers();
  if (worker_error) std::rethrow_exception(worker_error);
  progress.finish();
  result.rows_read = rows_read;
  result.provenance.inputs.push_back(
      {o.input_path, input_hash.get(), static_cast<std::int64_t>(rows_read)});
  result.stars = kept;
  if (kept == 0) {
    std::string first = result.rejected.empty()
                            ? ""
                            : fmt::format(" (first: {} {}: [{}] {})", input.row_label(),
                                          result.rejected[0].source_row, result.rejected[0].rule,
                                          result.rejected[0].message);
    throw InputError({o.input_path, {}, {}}, "no_rows_left",
                     fmt::format("all {} rows were rejected{}", rows_read, first));
  }
  return layout->schema;
}

}  // namespace

IngestResult run_ingest(const IngestOptions& o) {
  IngestResult result;
  StarTable& cat = result.catalog;
  bool first = true;
  StarTable schema = ingest_groups(o, result, [&](StarTable&& rows, std::size_t) {
    if (first) {
      cat = std::move(rows);
      first = false;
    } else {
      cat.append_rows(rows);
    }
  });
  if (first) cat = std::move(schema);
  if (!o.lightcurves.summary_path.empty()) {
    join_lightcurve_summary(cat, o.lightcurves, result);
    refuse_stars_without_photometry(cat, result);
    if (cat.rows() == 0)
      throw InputError({o.input_path, {}, {}}, "no_rows_left",
                       fmt::format("all {} rows were rejected (no star has a magnitude in any "
                                   "band, from the catalog or its light curve)",
                                   result.rows_read));
  }
  stamp_provenance(cat, result.provenance, "catalog");
  return result;
}

IngestResult ingest_catalog_file(const IngestOptions& o) {
  if (!o.lightcurves.summary_path.empty()) {
    // A light-curve join needs the whole catalog.
    IngestResult result = run_ingest(o);
    write_ingest_products(result, o);
    return result;
  }
  IngestResult result;
  // Made at the first accepted row: a file that fails its first checks leaves nothing.
  std::optional<FitsTableStream> stream;
  StarTable schema = ingest_groups(o, result, [&](StarTable&& rows, std::size_t expected) {
    if (rows.rows() == 0) return;
    // Made with a row for every input row expected: rows not used are dropped at the end,
    // and the table grows past them if a text file's estimate fell short.
    if (!stream) stream.emplace(o.catalog_path, "CATALOG", static_cast<std::int64_t>(expected));
    stream->append(rows);
  });
  stamp_provenance(schema, result.provenance, "catalog");
  StarTable rejects = result.rejects_table();
  stamp_provenance(rejects, result.provenance, "rejects");
  stream->finish(schema.header(), {{"REJECTS", &rejects}}, schema);
  write_csv_table(rejects, rejects_csv_path(o));
  result.catalog = std::move(schema);  // columns and header: the rows are in the file
  return result;
}

void write_ingest_products(const IngestResult& result, const IngestOptions& o) {
  StarTable rejects = result.rejects_table();
  stamp_provenance(rejects, result.provenance, "rejects");
  write_fits_tables(o.catalog_path, {{"CATALOG", &result.catalog}, {"REJECTS", &rejects}});
  write_csv_table(rejects, rejects_csv_path(o));
}

}  // namespace rungcal
