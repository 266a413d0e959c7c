// SPDX-License-Identifier: MIT
#include "rungcal/ingest/ingest_parts.hpp"

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <limits>
#include <map>
#include <optional>
#include <string>
#include <unordered_map>
#include <utility>
#include <variant>
#include <vector>

#include <fmt/format.h>

#include "rungcal/astrometry/astrometry.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal::ingest_parts {

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

namespace {

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

}  // namespace

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

namespace {

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
    warnings_.clear();
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
    check_class_limits(r, *row.pulsator_class);
    row.astrometric = astrometric_params();
    check_photometry(r);
    return row;
  }

  // The per-star limits the last accepted row broke under the "warn" policy.
  const std::vector<RowReject>& warnings() const { return warnings_; }
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
    if (!q.present()) return;  // the [lightcurves] join supplies it; checked after the join
    auto period = periods_.at(r);
    if (!period) throw RowReject{"missing_required", q.column_name, "the star has no period"};
    if (*period <= 0)
      throw RowReject{"period_nonpositive", q.column_name,
                      fmt::format("period {} d is not positive", *period)};
  }

  // The period against the plausible range of the star's class.
  void check_period_plausible(std::size_t r, const std::string& pulsator_class) const {
    if (!q_period_.present()) return;
    if (auto reject = implausible_period(o_, *periods_.at(r), pulsator_class, q_period_.column_name,
                                         "period"))
      throw std::move(*reject);
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

  // The star's parallax and period against its class's limits (ClassLimits): refused or
  // warned about by the quantity's policy.
  void check_class_limits(std::size_t r, const std::string& pulsator_class) {
    const ClassLimits& l = o_.class_limits;
    auto breaks = [&](UnitCheckPolicy policy, RowReject&& reject) {
      if (policy == UnitCheckPolicy::kRefuse) throw std::move(reject);
      warnings_.push_back(std::move(reject));
    };
    if (l.parallax_policy != UnitCheckPolicy::kOff) {
      auto max = l.parallax_max_mas.find(pulsator_class);
      auto p = value(s_parallax_);
      if (max != l.parallax_max_mas.end() && p && *p > max->second)
        breaks(l.parallax_policy,
               {"parallax_above_class_limit", m_.at("parallax").column_name,
                fmt::format("parallax {} mas is above the {} mas no {} star reaches ([validate."
                            "class_parallax_max_mas]; class_parallax_check = \"warn\" keeps it)",
                            *p, max->second, pulsator_class)});
    }
    if (!q_period_.present()) return;
    if (auto reject = period_outside_class(l, *periods_.at(r), pulsator_class,
                                           q_period_.column_name, "period"))
      breaks(l.period_policy, std::move(*reject));
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
    // With a light-curve join the rule waits for the join (refuse_incomplete_stars_after_join).
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
  std::vector<RowReject> warnings_;            // the row's broken limits under "warn"
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
    } else if (key == "ecl_lat" && m.ecl_lat_from_ra_dec) {
      const PreparedNumbers &ra = checks.number("ra"), &dec = checks.number("dec");
      fill_reals(out, n, [&](std::size_t k) {
        return ecliptic_latitude_deg(ra.value_or_nan(rows[k]), dec.value_or_nan(rows[k]));
      });
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

}  // namespace

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
      for (const RowReject& w : checks.warnings())
        group.warnings.push_back({in.source_rows[r], id ? *id : std::string(), w});
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

std::optional<RowReject> implausible_period(const IngestOptions& o, double period_d,
                                            const std::string& pulsator_class,
                                            const std::string& column, const std::string& what) {
  auto it = o.class_period_range.find(pulsator_class);
  const PlausibleRange& range = it == o.class_period_range.end() ? o.period_range : it->second;
  if (range.contains(period_d)) return std::nullopt;
  return RowReject{"period_out_of_range", column,
                   fmt::format("{} {} d is outside the plausible [{}, {}] d for {} ([validate] "
                               "period_range_d)",
                               what, period_d, range.min, range.max, pulsator_class)};
}

std::optional<RowReject> period_outside_class(const ClassLimits& l, double period_d,
                                              const std::string& pulsator_class,
                                              const std::string& column, const std::string& what) {
  if (l.period_policy == UnitCheckPolicy::kOff) return std::nullopt;
  auto range = l.period_d.find(pulsator_class);
  if (range == l.period_d.end() || range->second.contains(period_d)) return std::nullopt;
  return RowReject{
      "period_outside_class_range", column,
      fmt::format("{} {} d is outside the known [{}, {}] d of {} stars ([validate."
                  "class_period_known_range_d]; class_period_check = \"warn\" keeps it): "
                  "misclassified?",
                  what, period_d, range->second.min, range->second.max, pulsator_class)};
}

}  // namespace rungcal::ingest_parts
