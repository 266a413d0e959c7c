// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/lightcurve_stage.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <map>
#include <string>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/cluster.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

bool has_flag(std::uint32_t flags, PeriodFlag f) {
  return (flags & static_cast<std::uint32_t>(f)) != 0;
}

}  // namespace

std::string period_flag_names(std::uint32_t flags) {
  std::string out;
  for (const auto& [flag, name] : kPeriodFlagNames.entries)
    if (has_flag(flags, flag)) out += (out.empty() ? "" : ",") + std::string(name);
  return out;
}

namespace {

// Gaia epoch photometry: each star's epochs dropped per band, by a rejection flag
// (flagged_<band>) or for a missing value (missing_<band>); no columns for other layouts.
void add_dropped_epoch_columns(const std::vector<GaiaDroppedEpochs>& dropped,
                               const std::vector<StarResult>& stars, StarTable& t) {
  std::vector<std::string> bands;
  std::map<std::pair<std::string, std::string>, const GaiaDroppedEpochs*> by_star;
  for (const auto& d : dropped) {
    if (std::find(bands.begin(), bands.end(), d.band) == bands.end()) bands.push_back(d.band);
    by_star[{d.star, d.band}] = &d;
  }
  for (const auto& b : bands) {
    Column& flagged = t.add_column("flagged_" + b, ColumnType::kInteger, "",
                                   "Gaia epochs in " + b + " dropped by a rejection flag");
    Column& missing = t.add_column("missing_" + b, ColumnType::kInteger, "",
                                   "Gaia epochs in " + b + " dropped for a missing value");
    // The table has its rows already: the new columns come sized to them, all null.
    for (std::size_t r = 0; r < stars.size(); ++r) {
      auto it = by_star.find({stars[r].id, b});
      flagged.integer[r] = it == by_star.end() ? 0 : it->second->flagged;
      missing.integer[r] = it == by_star.end() ? 0 : it->second->missing;
      flagged.null[r] = missing.null[r] = 0;
    }
  }
}

}  // namespace

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
  add_dropped_epoch_columns(dropped, stars, t);
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
  write_csv_table(summary, lightcurve_summary_csv_path(o));
}

}  // namespace rungcal
