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
#include "rungcal/table/lightcurve_schema.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

namespace C = lightcurve_col;

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
    Column& flagged = t.add_column(band_column(lightcurve_col::kFlagged, b), ColumnType::kInteger,
                                   "", "Gaia epochs in " + b + " dropped by a rejection flag");
    Column& missing = t.add_column(band_column(lightcurve_col::kMissing, b), ColumnType::kInteger,
                                   "", "Gaia epochs in " + b + " dropped for a missing value");
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
  t.add_column(C::kId, ColumnType::kText, "", "star id, as in the time series");
  t.add_column(C::kPeriodD, ColumnType::kReal, "d", "period from the joint Fourier fit");
  t.add_column(C::kPeriodErrD, ColumnType::kReal, "d", "its 1-sigma error");
  t.add_column(C::kLogPeriod, ColumnType::kReal, "", "log10 of period_d");
  t.add_column(C::kUsable, ColumnType::kBoolean, "", "no blocking flag: the period can calibrate");
  t.add_column(C::kFlags, ColumnType::kText, "", "quality flags, comma-separated");
  t.add_column(C::kFlagBits, ColumnType::kInteger, "", "the same flags as bits");
  t.add_column(C::kFalseAlarm, ColumnType::kReal, "", "Baluev 2008 false-alarm probability");
  t.add_column(C::kPower, ColumnType::kReal, "",
               "periodogram power at the best peak (standard normalisation)");
  t.add_column(C::kSecondPeriodD, ColumnType::kReal, "d", "period of the strongest other peak");
  t.add_column(C::kSecondPower, ColumnType::kReal, "", "its power");
  t.add_column(C::kMaxPhaseGap, ColumnType::kReal, "", "largest gap in phase coverage, cycles");
  t.add_column(C::kNPoints, ColumnType::kInteger, "", "epochs read for the star");
  t.add_column(C::kBaselineD, ColumnType::kReal, "d", "time from first to last epoch");
  t.add_column(C::kTRef, ColumnType::kReal, "d",
               "reference time of the Fourier phases (" + scale_name + ")");
  t.add_column(C::kEpochMax, ColumnType::kReal, "d",
               "maximum light in epoch_band nearest t_ref: phase 0 (" + scale_name + ")");
  t.add_column(C::kEpochBand, ColumnType::kText, "", "the star's first fitted band");
  t.add_column(C::kSkippedBands, ColumnType::kText, "", "bands with too few epochs");
  struct BandColumns {
    const char* name;
    ColumnType type;
    const char* unit;
    const char* what;
  };
  static const BandColumns kPerBand[] = {
      {C::kMag, ColumnType::kReal, "mag", "intensity-averaged mean magnitude"},
      {C::kMagErr, ColumnType::kReal, "mag", "error of the intensity mean"},
      {C::kMagMagavg, ColumnType::kReal, "mag", "magnitude-averaged mean (Fourier m0)"},
      {C::kAmplitude, ColumnType::kReal, "mag", "peak-to-peak amplitude of the model"},
      {C::kEpochMax, ColumnType::kReal, "d", "epoch of maximum light nearest t_ref"},
      {C::kOrder, ColumnType::kInteger, "", "Fourier order chosen by BIC"},
      {C::kN, ColumnType::kInteger, "", "epochs in the band"},
      {C::kRms, ColumnType::kReal, "mag", "residual scatter about the model"},
      {C::kR21, ColumnType::kReal, "", "A2/A1 (sine series)"},
      {C::kR21Err, ColumnType::kReal, "", ""},
      {C::kPhi21, ColumnType::kReal, "rad", "phi2 - 2 phi1 mod 2 pi (sine series)"},
      {C::kPhi21Err, ColumnType::kReal, "rad", ""},
      {C::kR31, ColumnType::kReal, "", "A3/A1 (sine series)"},
      {C::kR31Err, ColumnType::kReal, "", ""},
      {C::kPhi31, ColumnType::kReal, "rad", "phi3 - 3 phi1 mod 2 pi (sine series)"},
      {C::kPhi31Err, ColumnType::kReal, "rad", ""},
  };
  for (const auto& b : bands)
    for (const auto& c : kPerBand)
      t.add_column(band_column(c.name, b), c.type, c.unit, c.what + std::string(" in ") + b);

  for (const auto& s : stars) {
    const bool has_period = s.frequency > 0;
    auto real_or_null = [&](const char* name, double v, bool ok) {
      ok&& std::isfinite(v) ? t.column(name).push_real(v) : t.column(name).push_null();
    };
    t.column(C::kId).push_text(s.id);
    real_or_null(C::kPeriodD, s.period_d, has_period);
    real_or_null(C::kPeriodErrD, s.period_err_d, has_period);
    real_or_null(C::kLogPeriod, has_period ? std::log10(s.period_d) : 0.0, has_period);
    t.column(C::kUsable).push_boolean(s.usable);
    t.column(C::kFlags).push_text(period_flag_names(s.flags));
    t.column(C::kFlagBits).push_integer(s.flags);
    real_or_null(C::kFalseAlarm, s.false_alarm, has_period);
    real_or_null(C::kPower, s.power, has_period);
    real_or_null(C::kSecondPeriodD, s.second_peak_period_d, s.second_peak_period_d > 0);
    real_or_null(C::kSecondPower, s.second_peak_power, s.second_peak_period_d > 0);
    real_or_null(C::kMaxPhaseGap, s.max_phase_gap, has_period);
    t.column(C::kNPoints).push_integer(static_cast<std::int64_t>(s.points));
    t.column(C::kBaselineD).push_real(s.baseline_d);
    real_or_null(C::kTRef, s.t_ref, has_period);
    real_or_null(C::kEpochMax, s.bands.empty() ? 0.0 : s.bands.front().measures.epoch_of_max,
                 !s.bands.empty());
    s.bands.empty() ? t.column(C::kEpochBand).push_null()
                    : t.column(C::kEpochBand).push_text(s.bands.front().band);
    std::string skipped;
    for (const auto& b : s.skipped_bands) skipped += (skipped.empty() ? "" : ",") + b;
    skipped.empty() ? t.column(C::kSkippedBands).push_null()
                    : t.column(C::kSkippedBands).push_text(skipped);
    for (const auto& b : bands) {
      auto found = std::find_if(s.bands.begin(), s.bands.end(),
                                [&](const BandResult& br) { return br.band == b; });
      const bool ok = found != s.bands.end();
      const CurveMeasures m = ok ? found->measures : CurveMeasures{};
      auto put = [&](const char* what, double v) {
        real_or_null(band_column(what, b).c_str(), v, ok);
      };
      put(C::kMag, m.intensity_mean);
      put(C::kMagErr, m.intensity_mean_err);
      put(C::kMagMagavg, m.magnitude_mean);
      put(C::kAmplitude, m.amplitude);
      put(C::kEpochMax, m.epoch_of_max);
      ok ? t.column(band_column(C::kOrder, b)).push_integer(found->curve.order)
         : t.column(band_column(C::kOrder, b)).push_null();
      ok ? t.column(band_column(C::kN, b))
               .push_integer(static_cast<std::int64_t>(found->curve.points))
         : t.column(band_column(C::kN, b)).push_null();
      put(C::kRms, ok ? found->curve.rms : 0.0);
      put(C::kR21, m.r21);
      put(C::kR21Err, m.r21_err);
      put(C::kPhi21, m.phi21);
      put(C::kPhi21Err, m.phi21_err);
      put(C::kR31, m.r31);
      put(C::kR31Err, m.r31_err);
      put(C::kPhi31, m.phi31);
      put(C::kPhi31Err, m.phi31_err);
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
  t.add_column(C::kId, ColumnType::kText);
  t.add_column(C::kBand, ColumnType::kText);
  t.add_column(C::kHarmonic, ColumnType::kInteger, "", "k; 0 holds the mean m0");
  t.add_column(C::kCosCoef, ColumnType::kReal, "mag",
               "a_k in m0 + sum a_k cos(2 pi k f (t - t_ref)) + b_k sin(...)");
  t.add_column(C::kSinCoef, ColumnType::kReal, "mag", "b_k");
  t.add_column(C::kFrequency, ColumnType::kReal, "d-1", "f, cycles per day");
  t.add_column(C::kTRef, ColumnType::kReal, "d");
  for (const auto& s : stars)
    for (const auto& b : s.bands)
      for (int k = 0; k <= b.curve.order; ++k) {
        t.column(C::kId).push_text(s.id);
        t.column(C::kBand).push_text(b.band);
        t.column(C::kHarmonic).push_integer(k);
        t.column(C::kCosCoef)
            .push_real(k == 0 ? b.curve.coefficients(0) : b.curve.coefficients(2 * k - 1));
        t.column(C::kSinCoef).push_real(k == 0 ? 0.0 : b.curve.coefficients(2 * k));
        t.column(C::kFrequency).push_real(s.frequency);
        t.column(C::kTRef).push_real(s.t_ref);
      }
  return t;
}

StarTable LightCurveResult::points_table() const {
  StarTable t;
  t.add_column(C::kId, ColumnType::kText);
  t.add_column(C::kBand, ColumnType::kText);
  t.add_column(C::kTime, ColumnType::kReal, "d");
  t.add_column(C::kPhase, ColumnType::kReal, "",
               "(time - epoch_max) f mod 1: maximum light of epoch_band at phase 0");
  t.add_column(C::kMag, ColumnType::kReal, "mag");
  t.add_column(C::kMagErr, ColumnType::kReal, "mag");
  t.add_column(C::kModelMag, ColumnType::kReal, "mag", "the Fourier model at this epoch");
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
        t.column(C::kId).push_text(s.id);
        t.column(C::kBand).push_text(b.band);
        t.column(C::kTime).push_real(ts.t[k]);
        t.column(C::kPhase).push_real(phase);
        t.column(C::kMag).push_real(ts.y[k]);
        t.column(C::kMagErr).push_real(ts.dy[k]);
        t.column(C::kModelMag).push_real(b.curve.magnitude_at_phase(cycles));
      }
    }
  }
  return t;
}

StarTable LightCurveResult::periodogram_table() const {
  StarTable t;
  t.add_column(C::kId, ColumnType::kText);
  t.add_column(C::kFrequency, ColumnType::kReal, "d-1", "cycles per day");
  t.add_column(C::kPower, ColumnType::kReal, "", "standard normalisation");
  for (const auto& s : stars)
    for (std::size_t k = 0; k < s.periodogram.size(); ++k) {
      t.column(C::kId).push_text(s.id);
      t.column(C::kFrequency).push_real(s.grid.at(k));
      t.column(C::kPower).push_real(s.periodogram[k]);
    }
  return t;
}

StarTable LightCurveResult::rejects_table() const {
  StarTable t;
  namespace R = reject_col;
  t.add_column(R::kSourceRow, ColumnType::kInteger, "", "line (text) or row (FITS) in the input");
  t.add_column(R::kId, ColumnType::kText);
  t.add_column(R::kRule, ColumnType::kText);
  t.add_column(R::kColumn, ColumnType::kText);
  t.add_column(R::kMessage, ColumnType::kText);
  for (const auto& r : rejected) {
    t.column(R::kSourceRow).push_integer(r.source_row);
    r.star.empty() ? t.column(R::kId).push_null() : t.column(R::kId).push_text(r.star);
    t.column(R::kRule).push_text(r.rule);
    t.column(R::kColumn).push_text(r.column);
    t.column(R::kMessage).push_text(r.message);
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
  std::vector<NamedTable> tables = {{lightcurve_hdu::kSummary, &summary},
                                    {lightcurve_hdu::kFourier, &fourier}};
  if (o.write_points) tables.emplace_back(lightcurve_hdu::kPoints, &points);
  tables.emplace_back(lightcurve_hdu::kPeriodogram, &periodograms);
  tables.emplace_back(lightcurve_hdu::kRejects, &rejects);
  write_fits_tables(o.output_path, tables);
  write_csv_table(summary, lightcurve_summary_csv_path(o));
}

}  // namespace rungcal
