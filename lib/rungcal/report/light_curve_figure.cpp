// SPDX-License-Identifier: MIT
// The light-curve figure and the light-curve products it reads; declared in figures.hpp.
#include <cairo.h>

#include <algorithm>
#include <cmath>
#include <utility>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/report/figure_parts.hpp"
#include "rungcal/report/figures.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/lightcurve_schema.hpp"

namespace rungcal {
using namespace figure_parts;
namespace {

namespace C = lightcurve_col;

std::size_t row_of(const StarTable& t, const std::string& id) {
  for (std::size_t i = 0; i < t.rows(); ++i)
    if (t.column(C::kId).text[i] == id) return i;
  return t.rows();
}

}  // namespace

LightCurveTables read_lightcurve_tables(const std::string& path) {
  LightCurveTables t;
  t.summary = read_fits_table(path, {lightcurve_hdu::kSummary, 0}).table;
  t.fourier = read_fits_table(path, {lightcurve_hdu::kFourier, 0}).table;
  t.points = read_fits_table(path, {lightcurve_hdu::kPoints, 0}).table;
  t.periodogram = read_fits_table(path, {lightcurve_hdu::kPeriodogram, 0}).table;
  return t;
}

std::string light_curve_star_problem(const LightCurveTables& lc, const std::string& star) {
  const std::size_t row = row_of(lc.summary, star);
  if (row == lc.summary.rows() || lc.summary.column(C::kPeriodD).is_null(row))
    return "the light-curve summary has no period for this star";
  for (std::size_t i = 0; i < lc.points.rows(); ++i)
    if (lc.points.column(C::kId).text[i] == star) return "";
  return "the light-curve product has no epochs for this star";
}

FigureSummary light_curve_figure(const LightCurveTables& lc, const std::string& star,
                                 FigureFormat format, const std::string& path, FigureWidth width) {
  const Canvas canvas = canvas_for(width);
  const std::size_t row = row_of(lc.summary, star);
  if (row == lc.summary.rows() || lc.summary.column(C::kPeriodD).is_null(row))
    throw InputError({path, {}, star, "row", "star"}, "no_rows_left",
                     "the light-curve summary has no period for this star");
  const double period = lc.summary.column(C::kPeriodD).real[row];
  const double frequency = 1.0 / period;
  const double t_ref = lc.summary.column(C::kTRef).real[row];
  const double phase_zero = (lc.summary.column(C::kEpochMax).real[row] - t_ref) * frequency;

  // Points and each band's Fourier coefficients.
  std::vector<std::string> bands;
  struct Obs {
    double phase, mag, err;
    std::size_t band;
  };
  std::vector<Obs> obs;
  auto band_index = [&](const std::string& b) {
    auto it = std::find(bands.begin(), bands.end(), b);
    if (it != bands.end()) return static_cast<std::size_t>(it - bands.begin());
    bands.push_back(b);
    return bands.size() - 1;
  };
  for (std::size_t i = 0; i < lc.points.rows(); ++i)
    if (lc.points.column(C::kId).text[i] == star)
      obs.push_back({lc.points.column(C::kPhase).real[i], lc.points.column(C::kMag).real[i],
                     lc.points.column(C::kMagErr).real[i],
                     band_index(lc.points.column(C::kBand).text[i])});
  std::vector<std::vector<std::pair<double, double>>> coef(bands.size());
  for (std::size_t i = 0; i < lc.fourier.rows(); ++i) {
    if (lc.fourier.column(C::kId).text[i] != star) continue;
    auto it = std::find(bands.begin(), bands.end(), lc.fourier.column(C::kBand).text[i]);
    if (it == bands.end()) continue;
    auto& c = coef[static_cast<std::size_t>(it - bands.begin())];
    const auto k = static_cast<std::size_t>(lc.fourier.column(C::kHarmonic).integer[i]);
    if (c.size() <= k) c.resize(k + 1);
    c[k] = {lc.fourier.column(C::kCosCoef).real[i], lc.fourier.column(C::kSinCoef).real[i]};
  }
  if (obs.empty())
    throw InputError({path, {}, star, "row", "star"}, "no_rows_left",
                     "the light-curve product has no epochs for this star");
  auto model = [&](std::size_t b, double phase) {
    const double x = 2 * M_PI * (phase + phase_zero);
    double m = coef[b].empty() ? NAN : coef[b][0].first;
    for (std::size_t k = 1; k < coef[b].size(); ++k) {
      const double kx = static_cast<double>(k) * x;
      m += coef[b][k].first * std::cos(kx) + coef[b][k].second * std::sin(kx);
    }
    return m;
  };

  double ymin = 1e9, ymax = -1e9;
  for (const auto& o : obs)
    ymin = std::min(ymin, o.mag - o.err), ymax = std::max(ymax, o.mag + o.err);
  for (std::size_t b = 0; b < bands.size(); ++b)  // the model's extremes, which epochs may miss
    for (int i = 0; i < 200 && !coef[b].empty(); ++i)
      ymin = std::min(ymin, model(b, i / 200.0)), ymax = std::max(ymax, model(b, i / 200.0));
  const double pad = 0.10 * (ymax - ymin + 0.1);  // the model and error bars clear the frame
  std::vector<double> freq, power;
  for (std::size_t i = 0; i < lc.periodogram.rows(); ++i)
    if (lc.periodogram.column(C::kId).text[i] == star) {
      freq.push_back(lc.periodogram.column(C::kFrequency).real[i]);
      power.push_back(lc.periodogram.column(C::kPower).real[i]);
    }
  const bool with_periodogram = !freq.empty();
  Panel top{90,         canvas.width - 30, 40,  with_periodogram ? 370.0 : 570.0, 0.0, 2.0,
            ymin - pad, ymax + pad,        true};
  AtomicOutput out(path);
  auto surface = open_surface(format, out.reopen_path(), canvas);
  cairo_t* cr = surface->cr;
  FigureSummary s;
  cairo_save(cr);
  cairo_rectangle(cr, top.left, top.top, top.right - top.left, top.bottom - top.top);
  cairo_clip(cr);
  for (std::size_t b = 0; b < bands.size(); ++b) {
    if (coef[b].empty()) continue;
    const double* c = kBandColours[b % 6];
    cairo_set_source_rgb(cr, c[0], c[1], c[2]);
    cairo_set_line_width(cr, 1.6);
    for (int i = 0; i <= 400; ++i) {
      const double ph = 2.0 * i / 400;
      i == 0 ? cairo_move_to(cr, top.px(ph), top.py(model(b, ph)))
             : cairo_line_to(cr, top.px(ph), top.py(model(b, ph)));
    }
    cairo_stroke(cr);
  }
  for (const auto& o : obs)
    for (double shift : {0.0, 1.0}) {
      cairo_set_source_rgba(cr, 0.35, 0.35, 0.35, 0.7);
      cairo_set_line_width(cr, 0.8);
      cairo_move_to(cr, top.px(o.phase + shift), top.py(o.mag - o.err));
      cairo_line_to(cr, top.px(o.phase + shift), top.py(o.mag + o.err));
      cairo_stroke(cr);
      band_marker(cr, top.px(o.phase + shift), top.py(o.mag), o.band);
    }
  cairo_restore(cr);
  s.used_points = static_cast<int>(obs.size());
  s.y_ticks = axes(cr, top, "phase (maximum light at 0)", "magnitude", true, 0.0, 8).y_ticks;
  // Legend: band names in their colour and shape, in one row above the plot box, beside the
  // title, where it can cover no epoch (issue 20).
  constexpr double kEntry = 56;
  const double legend_y = top.top - 16,
               legend_x = top.right - kEntry * static_cast<double>(bands.size());
  s.legend_left = legend_x, s.legend_right = top.right, s.legend_top = legend_y - 9,
  s.legend_bottom = legend_y + 9;
  for (std::size_t b = 0; b < bands.size(); ++b) {
    const double x = legend_x + 8 + kEntry * static_cast<double>(b);
    band_marker(cr, x, legend_y, b);
    text(cr, x + 10, legend_y, bands[b], 13, 0.0, 0.5);
  }
  text(cr, top.left + 10, top.top - 26, fmt::format("{}   P = {:.6f} d", star, period), 14, 0.0,
       1.0);

  if (with_periodogram) {
    // Power against period (log scale): a period is what a reader looks for.
    double p0 = 1.0 / freq.back(), p1 = 1.0 / freq.front();
    Panel bottom{90, canvas.width - 30, 430, 580, std::log10(p0), std::log10(p1), 0.0, 1.0, false};
    cairo_save(cr);
    cairo_rectangle(cr, bottom.left, bottom.top, bottom.right - bottom.left,
                    bottom.bottom - bottom.top);
    cairo_clip(cr);
    cairo_set_source_rgb(cr, kBandColours[0][0], kBandColours[0][1], kBandColours[0][2]);
    cairo_set_line_width(cr, 0.7);
    for (std::size_t i = 0; i < freq.size(); ++i) {
      const double x = bottom.px(std::log10(1.0 / freq[i])), y = bottom.py(power[i]);
      i == 0 ? cairo_move_to(cr, x, y) : cairo_line_to(cr, x, y);
    }
    cairo_stroke(cr);
    cairo_set_source_rgb(cr, kBandColours[1][0], kBandColours[1][1], kBandColours[1][2]);
    cairo_set_line_width(cr, 1.0);
    const double dash[] = {4.0, 3.0};
    cairo_set_dash(cr, dash, 2, 0);
    cairo_move_to(cr, bottom.px(std::log10(period)), bottom.top);
    cairo_line_to(cr, bottom.px(std::log10(period)), bottom.bottom);
    cairo_stroke(cr);
    cairo_restore(cr);
    axes(cr, bottom, "log10 period (days)", "power");
  }
  commit_figure(std::move(surface), out, path);
  record_plot_box(s, top, canvas);
  return s;
}

}  // namespace rungcal
