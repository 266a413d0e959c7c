// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/lightcurve_stage.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <map>
#include <set>
#include <unordered_map>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/byte_buffer.hpp"
#include "rungcal/core/cluster.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/progress.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

// Sampling aliases: the solar and sidereal day and the year (common practice for
// ground-based series).
constexpr double kAliasFrequencies[] = {1.0, 1.0027379, 1.0 / 365.25};

bool has_flag(std::uint32_t flags, PeriodFlag f) {
  return (flags & static_cast<std::uint32_t>(f)) != 0;
}
void set_flag(std::uint32_t& flags, PeriodFlag f) { flags |= static_cast<std::uint32_t>(f); }

double baseline_of(const StarSeries& star) {
  double lo = INFINITY, hi = -INFINITY;
  for (const auto& s : star.series)
    for (double t : s.t) {
      lo = std::min(lo, t);
      hi = std::max(hi, t);
    }
  return hi > lo ? hi - lo : 0.0;
}

double mean_time(const std::vector<TimeSeries>& series) {
  double sum = 0;
  std::size_t n = 0;
  for (const auto& s : series)
    for (double t : s.t) {
      sum += t;
      ++n;
    }
  // Rounded to a tenth of a day: a reference time a person can read back.
  return n ? std::round(10.0 * sum / static_cast<double>(n)) / 10.0 : 0.0;
}

// Local maxima of the power, strongest first.
std::vector<std::size_t> peaks_by_power(const std::vector<double>& p) {
  std::vector<std::size_t> peaks;
  for (std::size_t k = 0; k < p.size(); ++k) {
    const bool left = k == 0 || p[k] >= p[k - 1];
    const bool right = k + 1 == p.size() || p[k] > p[k + 1];
    if (left && right) peaks.push_back(k);
  }
  std::sort(peaks.begin(), peaks.end(), [&](std::size_t a, std::size_t b) { return p[a] > p[b]; });
  return peaks;
}

bool at_alias_of(double f1, double f2, double tolerance) {
  for (double fs : kAliasFrequencies)
    for (int n = 1; n <= 2; ++n)
      for (double candidate : {f1 + n * fs, f1 - n * fs, n * fs - f1})
        if (std::abs(std::abs(candidate) - f2) < tolerance) return true;
  return false;
}

double largest_phase_gap(const std::vector<TimeSeries>& series, double frequency, double t_ref) {
  std::vector<double> phases;
  for (const auto& s : series)
    for (double t : s.t) {
      double ph = frequency * (t - t_ref);
      phases.push_back(ph - std::floor(ph));
    }
  if (phases.empty()) return 1.0;
  std::sort(phases.begin(), phases.end());
  double gap = phases.front() + 1.0 - phases.back();
  for (std::size_t i = 1; i < phases.size(); ++i) gap = std::max(gap, phases[i] - phases[i - 1]);
  return gap;
}

std::size_t band_with_most_points(const std::vector<TimeSeries>& series) {
  std::size_t best = 0;
  for (std::size_t b = 1; b < series.size(); ++b)
    if (series[b].size() > series[best].size()) best = b;
  return best;
}

// Fourier orders per band by BIC at a frequency; a band that cannot carry K = 1 gets 1
// when it has the points for it (min_points guarantees 2K + 1 + min_dof for K = 1).
std::vector<int> orders_at(const std::vector<TimeSeries>& series, double f, double t_ref,
                           const LightCurveOptions& o) {
  std::vector<int> orders;
  for (const auto& s : series)
    orders.push_back(std::max(1, order_by_bic(s, f, t_ref, o.max_order, o.min_dof)));
  return orders;
}

std::string file_label(const LightCurveOptions& o) {
  return o.config_file.empty() ? o.source.path : o.config_file;
}

}  // namespace

std::string period_flag_names(std::uint32_t flags) {
  std::string out;
  for (const auto& [flag, name] : kPeriodFlagNames.entries)
    if (has_flag(flags, flag)) out += (out.empty() ? "" : ",") + std::string(name);
  return out;
}

std::string LightCurveOptions::check() const {
  if (source.path.empty()) return "source.path: required";
  if (!source.is_fits)
    if (std::string t = source.text.check(); !t.empty()) return "source." + t;
  for (const auto* c : {&star_column, &time_column, &band_column, &mag_column, &err_column})
    if (c->empty()) return "columns: star, time, band, mag and mag_err must name input columns";
  if (bands_file.empty()) return "bands_file: required";
  if (!(min_period_d > 0)) return "search.min_period: must be positive";
  if (!(max_period_d > min_period_d)) return "search.max_period: must exceed min_period";
  if (!(oversampling >= 1) || !std::isfinite(oversampling))
    return "search.oversampling: must be at least 1";
  if (search_harmonics < 1 || search_harmonics > 6) return "search.harmonics: must be 1 to 6";
  if (max_order < 1 || max_order > 12) return "model.max_order: must be 1 to 12";
  if (min_dof < 1) return "model.min_dof: must be at least 1";
  if (min_points < 3 + min_dof)
    return "model.min_points: must leave min_dof degrees of freedom for a first-order model (>= 3 "
           "+ min_dof)";
  if (!(max_false_alarm > 0 && max_false_alarm <= 1))
    return "flags.max_false_alarm: must be in (0, 1]";
  if (!(max_phase_gap > 0 && max_phase_gap < 1)) return "flags.max_phase_gap: must be in (0, 1)";
  if (!(competing_peak_ratio > 0 && competing_peak_ratio <= 1))
    return "flags.competing_peak_ratio: must be in (0, 1]";
  if (threads < 0) return "threads: must be 0 (every core) or positive";
  if (std::string f = files.check(); !f.empty()) return f;
  if (output_path.empty()) return "output.path: required";
  return "";
}

LightCurveOptions lightcurve_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  ConfigSection root = c.root();
  LightCurveOptions o;
  o.config_file = path;
  o.config_sha256 = c.sha256();
  auto source = root.section("source");
  if (!source)
    throw InputError({path, {}, "source", "line", "key"}, "config_missing_key",
                     "a [source] table is required");
  o.source = table_source_from_section(c, *source);
  std::string scale =
      source->string_or("time_scale", std::string(kTimeScaleNames.name(o.time_scale)));
  auto parsed_scale = kTimeScaleNames.parse(scale);
  if (!parsed_scale)
    source->fail("time_scale",
                 fmt::format("'{}' is not one of: {}", scale, kTimeScaleNames.choices()));
  o.time_scale = *parsed_scale;
  o.files.name_pattern = source->string_or("name_pattern", "");
  o.files.band = source->string_or("band", "");
  o.files.time_offset_d = source->number_or("time_offset_d", 0.0);
  if (auto cols = root.section("columns")) {
    o.star_column = cols->string_or("star", o.star_column);
    o.time_column = cols->string_or("time", o.time_column);
    o.band_column = cols->string_or("band", o.band_column);
    o.mag_column = cols->string_or("mag", o.mag_column);
    o.err_column = cols->string_or("mag_err", o.err_column);
  }
  o.bands_file = c.resolve_path(root.string_or("bands_file", "bands.toml"));
  o.threads = static_cast<int>(root.integer_or("threads", o.threads));
  if (auto s = root.section("search")) {
    o.min_period_d = s->number_or("min_period", o.min_period_d);
    o.max_period_d = s->number_or("max_period", o.max_period_d);
    o.oversampling = s->number_or("oversampling", o.oversampling);
    o.search_harmonics = static_cast<int>(s->integer_or("harmonics", o.search_harmonics));
  }
  if (auto s = root.section("model")) {
    o.max_order = static_cast<int>(s->integer_or("max_order", o.max_order));
    o.min_points = static_cast<int>(s->integer_or("min_points", o.min_points));
    o.min_dof = static_cast<int>(s->integer_or("min_dof", o.min_dof));
  }
  if (auto s = root.section("flags")) {
    o.max_false_alarm = s->number_or("max_false_alarm", o.max_false_alarm);
    o.max_phase_gap = s->number_or("max_phase_gap", o.max_phase_gap);
    o.competing_peak_ratio = s->number_or("competing_peak_ratio", o.competing_peak_ratio);
  }
  if (auto s = root.section("output")) {
    o.output_path = c.resolve_path(s->string_or("path", o.output_path));
    if (auto csv = s->get_string("summary_csv")) o.summary_csv_path = c.resolve_path(*csv);
    if (auto p = s->get_string_list("periodograms")) o.periodogram_stars = *p;
    o.write_points = s->bool_or("points", o.write_points);
  } else {
    o.output_path = c.resolve_path(o.output_path);
  }
  c.check_unknown_keys();
  throw_if_invalid(o.check(), path);
  return o;
}

StarResult analyse_star(const StarSeries& star, const LightCurveOptions& o, bool keep_periodogram) {
  StarResult r;
  r.id = star.id;
  std::vector<TimeSeries> used;
  std::vector<std::string> used_bands;
  for (std::size_t b = 0; b < star.series.size(); ++b) {
    r.points += star.series[b].size();
    if (static_cast<int>(star.series[b].size()) >= o.min_points) {
      used.push_back(star.series[b]);
      used_bands.push_back(star.bands[b]);
    } else {
      r.skipped_bands.push_back(star.bands[b]);
    }
  }
  r.baseline_d = baseline_of(star);
  if (used.empty() || !(r.baseline_d > 0)) {
    set_flag(r.flags, PeriodFlag::kTooFewPoints);
    return r;
  }

  // Search: the grid follows this star's baseline.
  r.grid = frequency_grid(r.baseline_d, o.min_period_d, o.max_period_d, o.oversampling);
  std::vector<double> power = multiband_power(used, r.grid, o.search_harmonics);
  std::vector<std::size_t> peaks = peaks_by_power(power);
  const std::size_t best = peaks.front();
  const double f_peak = r.grid.at(best);
  r.power = power[best];
  const double peak_width = 1.0 / r.baseline_d;
  for (std::size_t i = 1; i < peaks.size(); ++i) {
    const double f2 = r.grid.at(peaks[i]);
    if (std::abs(f2 - f_peak) <= peak_width) continue;  // the same peak's shoulder
    r.second_peak_power = power[peaks[i]];
    r.second_peak_period_d = 1.0 / f2;
    if (r.second_peak_power >= o.competing_peak_ratio * r.power)
      set_flag(r.flags, at_alias_of(f_peak, f2, 1.5 * peak_width) ? PeriodFlag::kAlias
                                                                  : PeriodFlag::kCompetingPeak);
    break;
  }
  if (best <= 1 || best + 2 >= r.grid.count) set_flag(r.flags, PeriodFlag::kAtSearchEdge);

  // Model: orders by BIC at the peak, a joint non-linear refinement, once more when the
  // refined frequency changes the orders.
  r.t_ref = mean_time(used);
  std::vector<int> orders = orders_at(used, f_peak, r.t_ref, o);
  LightCurveFit fit = refine_light_curve(used, orders, f_peak, r.t_ref);
  std::vector<int> refined_orders = orders_at(used, fit.frequency, r.t_ref, o);
  if (refined_orders != orders)
    fit = refine_light_curve(used, refined_orders, fit.frequency, r.t_ref);
  r.frequency = fit.frequency;
  r.frequency_err = fit.frequency_err;
  r.period_d = 1.0 / fit.frequency;
  r.period_err_d = fit.frequency_err / (fit.frequency * fit.frequency);
  r.iterations = fit.iterations;
  if (!fit.converged) set_flag(r.flags, PeriodFlag::kNotConverged);
  if (std::abs(fit.frequency - f_peak) > peak_width) set_flag(r.flags, PeriodFlag::kRefinementJump);
  if (r.baseline_d * fit.frequency < 3.0) set_flag(r.flags, PeriodFlag::kShortBaseline);

  // Significance: the single-harmonic power of the best-sampled band at the refined
  // frequency, against the searched range.
  const TimeSeries& main_band = used[band_with_most_points(used)];
  FrequencyGrid at_peak{fit.frequency, r.grid.step, 1};
  r.false_alarm =
      false_alarm_probability(lomb_scargle_power(main_band, at_peak)[0], main_band, r.grid.last());
  if (r.false_alarm > o.max_false_alarm) set_flag(r.flags, PeriodFlag::kNotSignificant);
  r.max_phase_gap = largest_phase_gap(used, fit.frequency, r.t_ref);
  if (r.max_phase_gap > o.max_phase_gap) set_flag(r.flags, PeriodFlag::kPhaseGap);
  r.usable = (r.flags & kBlockingPeriodFlags) == 0;

  for (std::size_t b = 0; b < used.size(); ++b)
    r.bands.push_back(
        {used_bands[b], fit.bands[b], measure_curve(fit.bands[b], fit.frequency, r.t_ref)});
  if (keep_periodogram) r.periodogram = std::move(power);
  return r;
}

std::vector<StarSeries> group_observations(const SourceTable& in, const LightCurveOptions& o,
                                           const BandTable& band_table,
                                           std::vector<ObservationReject>& rejected,
                                           std::vector<std::string>& band_order) {
  const StarTable& t = in.table;
  for (const auto* c :
       {&o.star_column, &o.time_column, &o.band_column, &o.mag_column, &o.err_column}) {
    if (!t.has(*c)) {
      auto bad = in.unusable_columns.find(*c);
      throw InputError({in.file, {}, *c}, "missing_column",
                       bad != in.unusable_columns.end()
                           ? bad->second
                           : "the time series has no such column (see [columns])");
    }
  }
  const Column& star = t.column(o.star_column);
  const Column& time = t.column(o.time_column);
  const Column& band = t.column(o.band_column);
  const Column& mag = t.column(o.mag_column);
  const Column& err = t.column(o.err_column);
  std::vector<StarSeries> stars;
  std::unordered_map<std::string, std::size_t> star_index;
  // Times of the (star, band) series whose epochs came out of time order, for the repeat
  // check; a series in time order (the usual case) needs only its last time.
  std::map<std::pair<std::size_t, std::size_t>, std::set<double>> unordered_series;
  auto repeats_an_epoch = [&](std::size_t star_at, std::size_t band_at, const TimeSeries* ts,
                              double when) {
    if (!ts) return false;
    const auto key = std::pair{star_at, band_at};
    auto it = unordered_series.find(key);
    if (it == unordered_series.end()) {
      if (ts->t.empty() || when > ts->t.back()) return false;
      it = unordered_series.emplace(key, std::set<double>(ts->t.begin(), ts->t.end())).first;
    }
    return !it->second.insert(when).second;
  };
  for (std::size_t r = 0; r < t.rows(); ++r) {
    const std::int64_t row = in.source_rows[r];
    const std::string id = star.is_null(r) ? "" : star.to_string(r);
    auto reject = [&](const std::string& rule, const std::string& column,
                      const std::string& message) {
      rejected.push_back({row, id, rule, column, message});
    };
    if (id.empty()) {
      reject("missing_required", o.star_column, "the epoch has no star id");
      continue;
    }
    const std::string b = band.is_null(r) ? "" : band.to_string(r);
    if (b.empty()) {
      reject("missing_required", o.band_column, "the epoch has no band");
      continue;
    }
    if (!band_table.find(b)) {
      reject("unknown_band", o.band_column, fmt::format("band '{}' is not in the band table", b));
      continue;
    }
    auto tv = cell_number(time, r), mv = cell_number(mag, r), ev = cell_number(err, r);
    if (!tv || !std::isfinite(*tv)) {
      reject("not_a_number", o.time_column, "the time is missing or not a number");
      continue;
    }
    if (!mv || !std::isfinite(*mv)) {
      reject("not_a_number", o.mag_column, "the magnitude is missing or not a number");
      continue;
    }
    if (!ev || !std::isfinite(*ev)) {
      reject("missing_error", o.err_column, "the magnitude error is missing or not a number");
      continue;
    }
    if (!(*ev > 0)) {
      reject("magnitude_error_nonpositive", o.err_column,
             fmt::format("magnitude error {} is not positive", *ev));
      continue;
    }
    auto [it, fresh] = star_index.emplace(id, stars.size());
    if (fresh) stars.push_back({id, {}, {}});
    StarSeries& s = stars[it->second];
    auto bi = std::find(s.bands.begin(), s.bands.end(), b);
    const auto band_index = static_cast<std::size_t>(bi - s.bands.begin());
    const TimeSeries* existing = bi == s.bands.end() ? nullptr : &s.series[band_index];
    if (repeats_an_epoch(it->second, band_index, existing, *tv)) {
      reject("duplicate_epoch", o.time_column,
             fmt::format("star {} already has a {} epoch at {}", id, b, *tv));
      continue;
    }
    if (bi == s.bands.end()) {
      s.bands.push_back(b);
      s.series.emplace_back();
    }
    if (std::find(band_order.begin(), band_order.end(), b) == band_order.end())
      band_order.push_back(b);
    TimeSeries& ts = s.series[band_index];
    ts.t.push_back(*tv);
    ts.y.push_back(*mv);
    ts.dy.push_back(*ev);
  }
  return stars;
}

std::string encode_star_result(const StarResult& s) {
  ByteWriter w;
  w.put_string(s.id);
  w.put(s.points);
  for (double v : {s.baseline_d, s.frequency, s.frequency_err, s.period_d, s.period_err_d, s.power,
                   s.false_alarm, s.second_peak_power, s.second_peak_period_d, s.t_ref,
                   s.max_phase_gap})
    w.put(v);
  w.put(s.flags);
  w.put<std::uint8_t>(s.usable);
  w.put(s.iterations);
  w.put<std::uint64_t>(s.bands.size());
  for (const BandResult& b : s.bands) {
    w.put_string(b.band);
    w.put(b.curve.order);
    w.put_vector(b.curve.coefficients);
    w.put_matrix(b.curve.covariance);
    w.put(b.curve.points);
    w.put(b.curve.chi2);
    w.put(b.curve.rms);
    w.put(b.measures);
  }
  w.put_strings(s.skipped_bands);
  w.put_vector(s.periodogram);
  w.put(s.grid);
  return w.release();
}

StarResult decode_star_result(const std::string& bytes) {
  ByteReader r(bytes);
  StarResult s;
  s.id = r.get_string();
  s.points = r.get<std::size_t>();
  for (double* v : {&s.baseline_d, &s.frequency, &s.frequency_err, &s.period_d, &s.period_err_d,
                    &s.power, &s.false_alarm, &s.second_peak_power, &s.second_peak_period_d,
                    &s.t_ref, &s.max_phase_gap})
    *v = r.get<double>();
  s.flags = r.get<std::uint32_t>();
  s.usable = r.get<std::uint8_t>() != 0;
  s.iterations = r.get<int>();
  s.bands.resize(r.get<std::uint64_t>());
  for (BandResult& b : s.bands) {
    b.band = r.get_string();
    b.curve.order = r.get<int>();
    b.curve.coefficients = r.get_column();
    b.curve.covariance = r.get_matrix();
    b.curve.points = r.get<std::size_t>();
    b.curve.chi2 = r.get<double>();
    b.curve.rms = r.get<double>();
    b.measures = r.get<CurveMeasures>();
  }
  s.skipped_bands = r.get_strings();
  s.periodogram = r.get_vector<double>();
  s.grid = r.get<FrequencyGrid>();
  if (!r.at_end()) throw std::logic_error("star result message longer than its fields");
  return s;
}

std::vector<std::string> lightcurve_input_files(const LightCurveOptions& o) {
  return o.files.enabled() ? per_star_file_list(o.source.path) : std::vector<std::string>{o.source.path};
}

LightCurveResult run_lightcurves(const LightCurveOptions& o) {
  throw_if_invalid(o.check(), file_label(o));
  BandTable band_table = BandTable::from_file(o.bands_file);
  spdlog::debug("reading {}", o.source.path);
  LightCurveResult result;
  result.provenance = Provenance::for_stage("lightcurve");
  result.provenance.config_sha256 = o.config_sha256;
  SourceTable in;
  if (o.files.enabled()) {
    in = read_per_star_files(o.source, o.files, {o.star_column, o.time_column, o.band_column, o.mag_column, o.err_column},
                             result.provenance.inputs);
  } else {
    in = read_table_source(o.source);
    result.provenance.inputs.push_back(
        {o.source.path, sha256_file(o.source.path), static_cast<std::int64_t>(in.table.rows())});
  }
  if (in.table.rows() == 0)
    throw InputError({in.file, {}, {}}, "empty_file", "the time series has no rows");
  spdlog::debug("{} rows read", in.table.rows());
  result.rows_read = in.table.rows();
  result.series = group_observations(in, o, band_table, result.rejected, result.bands);
  spdlog::debug("{} rows read and grouped into {} stars", in.table.rows(), result.series.size());
  if (result.series.empty())
    throw InputError({in.file, {}, {}}, "no_rows_left",
                     fmt::format("all {} rows were refused (first: {} {}: [{}] {})",
                                 in.table.rows(), in.row_label, result.rejected.front().source_row,
                                 result.rejected.front().rule, result.rejected.front().message));
  const bool keep_all = std::find(o.periodogram_stars.begin(), o.periodogram_stars.end(), "*") !=
                        o.periodogram_stars.end();
  const std::set<std::string> keep(o.periodogram_stars.begin(), o.periodogram_stars.end());
  result.stars.resize(result.series.size());
  Progress progress("light curves", result.series.size());
  distributed_for(
      result.series.size(), worker_threads(o.threads),
      [&](std::size_t i) {
        const StarSeries& s = result.series[i];
        result.stars[i] = analyse_star(s, o, keep_all || keep.count(s.id));
        progress.advance();
      },
      [&](std::size_t i) { return encode_star_result(result.stars[i]); },
      [&](std::size_t i, const std::string& bytes) {
        result.stars[i] = decode_star_result(bytes);
      });
  progress.finish();
  return result;
}

StarTable LightCurveResult::summary_table(TimeScale scale) const {
  StarTable t;
  const std::string scale_name(kTimeScaleNames.name(scale));
  t.add_column("id", ColumnType::kText, "", "star id, as in the time series");
  t.add_column("period_d", ColumnType::kReal, "d", "period from the joint Fourier fit");
  t.add_column("period_err_d", ColumnType::kReal, "d", "its 1-sigma error");
  t.add_column("log_period", ColumnType::kReal, "", "log10 of period_d");
  t.add_column("usable", ColumnType::kBoolean, "", "no blocking flag: the period can calibrate");
  t.add_column("flags", ColumnType::kText, "", "quality flags, comma-separated");
  t.add_column("flag_bits", ColumnType::kInteger, "", "the same flags as bits");
  t.add_column("false_alarm", ColumnType::kReal, "", "Baluev 2008 false-alarm probability");
  t.add_column("power", ColumnType::kReal, "",
               "periodogram power at the best peak (standard normalisation)");
  t.add_column("second_period_d", ColumnType::kReal, "d", "period of the strongest other peak");
  t.add_column("second_power", ColumnType::kReal, "", "its power");
  t.add_column("max_phase_gap", ColumnType::kReal, "", "largest gap in phase coverage, cycles");
  t.add_column("n_points", ColumnType::kInteger, "", "epochs read for the star");
  t.add_column("baseline_d", ColumnType::kReal, "d", "time from first to last epoch");
  t.add_column("t_ref", ColumnType::kReal, "d",
               "reference time of the Fourier phases (" + scale_name + ")");
  t.add_column("epoch_max", ColumnType::kReal, "d",
               "maximum light in epoch_band nearest t_ref: phase 0 (" + scale_name + ")");
  t.add_column("epoch_band", ColumnType::kText, "", "the star's first fitted band");
  t.add_column("skipped_bands", ColumnType::kText, "", "bands with too few epochs");
  struct BandColumns {
    const char* name;
    ColumnType type;
    const char* unit;
    const char* what;
  };
  static const BandColumns kPerBand[] = {
      {"mag", ColumnType::kReal, "mag", "intensity-averaged mean magnitude"},
      {"mag_err", ColumnType::kReal, "mag", "error of the intensity mean"},
      {"mag_magavg", ColumnType::kReal, "mag", "magnitude-averaged mean (Fourier m0)"},
      {"amplitude", ColumnType::kReal, "mag", "peak-to-peak amplitude of the model"},
      {"epoch_max", ColumnType::kReal, "d", "epoch of maximum light nearest t_ref"},
      {"order", ColumnType::kInteger, "", "Fourier order chosen by BIC"},
      {"n", ColumnType::kInteger, "", "epochs in the band"},
      {"rms", ColumnType::kReal, "mag", "residual scatter about the model"},
      {"r21", ColumnType::kReal, "", "A2/A1 (sine series)"},
      {"r21_err", ColumnType::kReal, "", ""},
      {"phi21", ColumnType::kReal, "rad", "phi2 - 2 phi1 mod 2 pi (sine series)"},
      {"phi21_err", ColumnType::kReal, "rad", ""},
      {"r31", ColumnType::kReal, "", "A3/A1 (sine series)"},
      {"r31_err", ColumnType::kReal, "", ""},
      {"phi31", ColumnType::kReal, "rad", "phi3 - 3 phi1 mod 2 pi (sine series)"},
      {"phi31_err", ColumnType::kReal, "rad", ""},
  };
  for (const auto& b : bands)
    for (const auto& c : kPerBand)
      t.add_column(fmt::format("{}_{}", c.name, b), c.type, c.unit,
                   c.what + std::string(" in ") + b);

  for (const auto& s : stars) {
    const bool has_period = s.frequency > 0;
    auto real_or_null = [&](const char* name, double v, bool ok) {
      ok&& std::isfinite(v) ? t.column(name).push_real(v) : t.column(name).push_null();
    };
    t.column("id").push_text(s.id);
    real_or_null("period_d", s.period_d, has_period);
    real_or_null("period_err_d", s.period_err_d, has_period);
    real_or_null("log_period", has_period ? std::log10(s.period_d) : 0.0, has_period);
    t.column("usable").push_boolean(s.usable);
    t.column("flags").push_text(period_flag_names(s.flags));
    t.column("flag_bits").push_integer(s.flags);
    real_or_null("false_alarm", s.false_alarm, has_period);
    real_or_null("power", s.power, has_period);
    real_or_null("second_period_d", s.second_peak_period_d, s.second_peak_period_d > 0);
    real_or_null("second_power", s.second_peak_power, s.second_peak_period_d > 0);
    real_or_null("max_phase_gap", s.max_phase_gap, has_period);
    t.column("n_points").push_integer(static_cast<std::int64_t>(s.points));
    t.column("baseline_d").push_real(s.baseline_d);
    real_or_null("t_ref", s.t_ref, has_period);
    real_or_null("epoch_max", s.bands.empty() ? 0.0 : s.bands.front().measures.epoch_of_max,
                 !s.bands.empty());
    s.bands.empty() ? t.column("epoch_band").push_null()
                    : t.column("epoch_band").push_text(s.bands.front().band);
    std::string skipped;
    for (const auto& b : s.skipped_bands) skipped += (skipped.empty() ? "" : ",") + b;
    skipped.empty() ? t.column("skipped_bands").push_null()
                    : t.column("skipped_bands").push_text(skipped);
    for (const auto& b : bands) {
      auto found = std::find_if(s.bands.begin(), s.bands.end(),
                                [&](const BandResult& br) { return br.band == b; });
      const bool ok = found != s.bands.end();
      const CurveMeasures m = ok ? found->measures : CurveMeasures{};
      auto put = [&](const char* what, double v) {
        real_or_null(fmt::format("{}_{}", what, b).c_str(), v, ok);
      };
      put("mag", m.intensity_mean);
      put("mag_err", m.intensity_mean_err);
      put("mag_magavg", m.magnitude_mean);
      put("amplitude", m.amplitude);
      put("epoch_max", m.epoch_of_max);
      ok ? t.column("order_" + b).push_integer(found->curve.order)
         : t.column("order_" + b).push_null();
      ok ? t.column("n_" + b).push_integer(static_cast<std::int64_t>(found->curve.points))
         : t.column("n_" + b).push_null();
      put("rms", ok ? found->curve.rms : 0.0);
      put("r21", m.r21);
      put("r21_err", m.r21_err);
      put("phi21", m.phi21);
      put("phi21_err", m.phi21_err);
      put("r31", m.r31);
      put("r31_err", m.r31_err);
      put("phi31", m.phi31);
      put("phi31_err", m.phi31_err);
    }
  }
  std::string band_list;
  for (const auto& b : bands) band_list += (band_list.empty() ? "" : ",") + b;
  t.set_keyword(key::kBands, band_list, "bands with mag_<band> columns");
  t.set_keyword("RGTIMESC", scale_name, "time scale of t_ref and epoch_max_*");
  return t;
}

StarTable LightCurveResult::fourier_table() const {
  StarTable t;
  t.add_column("id", ColumnType::kText);
  t.add_column("band", ColumnType::kText);
  t.add_column("harmonic", ColumnType::kInteger, "", "k; 0 holds the mean m0");
  t.add_column("cos_coef", ColumnType::kReal, "mag",
               "a_k in m0 + sum a_k cos(2 pi k f (t - t_ref)) + b_k sin(...)");
  t.add_column("sin_coef", ColumnType::kReal, "mag", "b_k");
  t.add_column("frequency", ColumnType::kReal, "d-1", "f, cycles per day");
  t.add_column("t_ref", ColumnType::kReal, "d");
  for (const auto& s : stars)
    for (const auto& b : s.bands)
      for (int k = 0; k <= b.curve.order; ++k) {
        t.column("id").push_text(s.id);
        t.column("band").push_text(b.band);
        t.column("harmonic").push_integer(k);
        t.column("cos_coef")
            .push_real(k == 0 ? b.curve.coefficients(0) : b.curve.coefficients(2 * k - 1));
        t.column("sin_coef").push_real(k == 0 ? 0.0 : b.curve.coefficients(2 * k));
        t.column("frequency").push_real(s.frequency);
        t.column("t_ref").push_real(s.t_ref);
      }
  return t;
}

StarTable LightCurveResult::points_table() const {
  StarTable t;
  t.add_column("id", ColumnType::kText);
  t.add_column("band", ColumnType::kText);
  t.add_column("time", ColumnType::kReal, "d");
  t.add_column("phase", ColumnType::kReal, "",
               "(time - epoch_max) f mod 1: maximum light of epoch_band at phase 0");
  t.add_column("mag", ColumnType::kReal, "mag");
  t.add_column("mag_err", ColumnType::kReal, "mag");
  t.add_column("model_mag", ColumnType::kReal, "mag", "the Fourier model at this epoch");
  for (std::size_t i = 0; i < stars.size(); ++i) {
    const StarResult& s = stars[i];
    for (const auto& b : s.bands) {
      const double phase_zero = s.bands.front().measures.phase_of_max;
      const StarSeries& star_series = series[i];
      auto bi = std::find(star_series.bands.begin(), star_series.bands.end(), b.band) -
                star_series.bands.begin();
      const TimeSeries& ts = star_series.series[static_cast<std::size_t>(bi)];
      for (std::size_t k = 0; k < ts.size(); ++k) {
        const double cycles = s.frequency * (ts.t[k] - s.t_ref);
        double phase = cycles - phase_zero;
        phase -= std::floor(phase);
        t.column("id").push_text(s.id);
        t.column("band").push_text(b.band);
        t.column("time").push_real(ts.t[k]);
        t.column("phase").push_real(phase);
        t.column("mag").push_real(ts.y[k]);
        t.column("mag_err").push_real(ts.dy[k]);
        t.column("model_mag").push_real(b.curve.magnitude_at_phase(cycles));
      }
    }
  }
  return t;
}

StarTable LightCurveResult::periodogram_table() const {
  StarTable t;
  t.add_column("id", ColumnType::kText);
  t.add_column("frequency", ColumnType::kReal, "d-1", "cycles per day");
  t.add_column("power", ColumnType::kReal, "", "standard normalisation");
  for (const auto& s : stars)
    for (std::size_t k = 0; k < s.periodogram.size(); ++k) {
      t.column("id").push_text(s.id);
      t.column("frequency").push_real(s.grid.at(k));
      t.column("power").push_real(s.periodogram[k]);
    }
  return t;
}

StarTable LightCurveResult::rejects_table() const {
  StarTable t;
  t.add_column("source_row", ColumnType::kInteger, "", "line (text) or row (FITS) in the input");
  t.add_column("id", ColumnType::kText);
  t.add_column("rule", ColumnType::kText);
  t.add_column("column", ColumnType::kText);
  t.add_column("message", ColumnType::kText);
  for (const auto& r : rejected) {
    t.column("source_row").push_integer(r.source_row);
    r.star.empty() ? t.column("id").push_null() : t.column("id").push_text(r.star);
    t.column("rule").push_text(r.rule);
    t.column("column").push_text(r.column);
    t.column("message").push_text(r.message);
  }
  return t;
}

void write_lightcurve_products(const LightCurveResult& result, const LightCurveOptions& o) {
  if (!Cluster::world().writes_outputs()) return;
  StarTable summary = result.summary_table(o.time_scale);
  StarTable fourier = result.fourier_table();
  StarTable points = o.write_points ? result.points_table() : StarTable{};
  StarTable periodograms = result.periodogram_table();
  StarTable rejects = result.rejects_table();
  stamp_provenance(summary, result.provenance, "lightcurve_summary");
  summary.set_keyword("RGPMIN", o.min_period_d, "[d] shortest period searched");
  summary.set_keyword("RGPMAX", o.max_period_d, "[d] longest period searched");
  summary.set_keyword("RGOVERSM", o.oversampling, "grid points per peak width");
  summary.set_keyword("RGHARMS", static_cast<std::int64_t>(o.search_harmonics),
                      "Fourier terms in the periodogram");
  for (StarTable* t : {&fourier, &points, &periodograms, &rejects})
    stamp_provenance(*t, result.provenance, "lightcurve_summary");
  std::vector<NamedTable> tables = {{"SUMMARY", &summary}, {"FOURIER", &fourier}};
  if (o.write_points) tables.emplace_back("POINTS", &points);
  tables.emplace_back("PERIODOGRAM", &periodograms);
  tables.emplace_back("REJECTS", &rejects);
  write_fits_tables(o.output_path, tables);
  std::string csv = o.summary_csv_path;
  if (csv.empty()) csv = std::filesystem::path(o.output_path).replace_extension(".csv").string();
  write_csv_table(summary, csv);
}

}  // namespace rungcal
