// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/lightcurve_stage.hpp"

#include <algorithm>
#include <cmath>
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
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

// Sampling aliases: the solar and sidereal day and the year (common practice for
// ground-based series).
constexpr double kAliasFrequencies[] = {1.0, 1.0027379, 1.0 / 365.25};

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

std::size_t nearest_index(const FrequencyGrid& grid, double f) {
  const double k = std::round((f - grid.first) / grid.step);
  return static_cast<std::size_t>(std::clamp(k, 0.0, static_cast<double>(grid.count - 1)));
}

// f2 is f / k (k = 2..harmonics): the search's model fits the curve there too, as its k-th
// harmonic (fundamental_frequency), so it is no competitor.
bool is_subharmonic(double f2, double f, int harmonics, double width) {
  for (int k = 2; k <= harmonics; ++k)
    if (std::abs(f2 - f / k) <= width) return true;
  return false;
}

// A Gaia source whose every epoch was dropped has no light curve and so no SUMMARY row: it
// gets a REJECTS row saying why.
void note_sources_without_epochs(LightCurveResult& result) {
  std::set<std::string> with_epochs;
  for (const auto& s : result.series) with_epochs.insert(s.id);
  std::map<std::string, std::pair<std::int64_t, std::int64_t>> lost;  // star -> (row, dropped)
  for (const auto& d : result.dropped)
    if (!with_epochs.count(d.star)) {
      auto& [row, n] = lost[d.star];
      row = d.source_row;
      n += d.flagged + d.missing;
    }
  for (const auto& [star, lost_epochs] : lost)
    result.rejected.push_back(
        {lost_epochs.first, star, "no_usable_epochs", "",
         fmt::format("all {} epochs were flagged or had a missing value", lost_epochs.second)});
}

std::string file_label(const LightCurveOptions& o) {
  return o.config_file.empty() ? o.source.path : o.config_file;
}

}  // namespace

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
  const double f_highest = r.grid.at(peaks.front());
  const double f_peak =
      fundamental_frequency(used, f_highest, r.grid.step, o.search_harmonics, r.grid.last());
  const std::size_t best = nearest_index(r.grid, f_peak);
  r.power = power[best];
  const double peak_width = 1.0 / r.baseline_d;
  for (std::size_t i = 1; i < peaks.size(); ++i) {
    const double f2 = r.grid.at(peaks[i]);
    if (std::abs(f2 - f_peak) <= peak_width) continue;  // the same peak's shoulder
    if (is_subharmonic(f2, f_peak, o.search_harmonics, peak_width)) continue;  // the same curve
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
  for (double v :
       {s.baseline_d, s.frequency, s.frequency_err, s.period_d, s.period_err_d, s.power,
        s.false_alarm, s.second_peak_power, s.second_peak_period_d, s.t_ref, s.max_phase_gap})
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
  for (double* v :
       {&s.baseline_d, &s.frequency, &s.frequency_err, &s.period_d, &s.period_err_d, &s.power,
        &s.false_alarm, &s.second_peak_power, &s.second_peak_period_d, &s.t_ref, &s.max_phase_gap})
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

LightCurveResult run_lightcurves(const LightCurveOptions& o) {
  throw_if_invalid(o.check(), file_label(o));
  BandTable band_table = BandTable::from_file(o.bands_file);
  spdlog::debug("reading {}", o.source.path);
  LightCurveResult result;
  result.provenance = Provenance::for_stage("lightcurve");
  result.provenance.config_sha256 = o.config_sha256;
  SourceTable in;
  const LightCurveColumns columns{o.star_column, o.time_column, o.band_column, o.mag_column,
                                  o.err_column};
  if (o.layout == SourceLayout::kGaiaEpoch) {
    in =
        read_gaia_epochs(o.source, o.gaia_bands, columns, result.provenance.inputs, result.dropped);
  } else if (o.files.enabled()) {
    in = read_per_star_files(o.source, o.files, columns, result.provenance.inputs);
  } else {
    in = read_table_source(o.source);
    result.provenance.inputs.push_back(
        {o.source.path, sha256_file(o.source.path), static_cast<std::int64_t>(in.table.rows())});
  }
  if (in.table.rows() == 0 && !result.dropped.empty())
    throw InputError({in.file, {}, {}}, "no_rows_left",
                     "no Gaia epoch is left after the rejection flags and missing values");
  if (in.table.rows() == 0)
    throw InputError({in.file, {}, {}}, "empty_file", "the time series has no rows");
  spdlog::debug("{} rows read", in.table.rows());
  result.rows_read = in.table.rows();
  result.series = group_observations(in, o, band_table, result.rejected, result.bands);
  spdlog::debug("{} rows read and grouped into {} stars", in.table.rows(), result.series.size());
  note_sources_without_epochs(result);
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

}  // namespace rungcal
