// SPDX-License-Identifier: MIT
#include "rungcal/report/figures.hpp"

#include <cairo.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <memory>
#include <optional>
#include <utility>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/report/figure_parts.hpp"
#include "rungcal/report/likely_outlier.hpp"

namespace rungcal {
using namespace figure_parts;
namespace {

double parameter(const FitRelationRecord& rel, const std::string& name, double fallback = 0.0) {
  const FitParameterRecord* p = rel.find_parameter(name);
  return p ? p->value : fallback;
}

// 0 when the parameter or its error is missing: drawn without an error bar.
double parameter_error(const FitRelationRecord& rel, const std::string& name) {
  const FitParameterRecord* p = rel.find_parameter(name);
  return p && p->error ? *p->error : 0.0;
}

struct Point {
  double x, y, lo, hi, r;  // y with asymmetric errors (lo, hi as values), residual
  bool used, open_below;
  Mark mark = Mark::kUsed;
};

// The fitted relation at [Fe/H] = 0 and its intrinsic scatter.
struct Relation {
  double alpha, beta, pivot, sigma;
  double at(double log_p) const { return alpha + beta * (log_p - pivot); }
};

// The PL diagram's key: used and refused markers with their counts, the relation and its
// scatter band, and the arrow of an open error bar; sized by its longest text.
struct PlKey {
  std::vector<std::string> texts;  // one a row, in the order drawn
  bool outliers = false;           // a row for the likely outliers
  double width = 0, height = 0;    // units
};
constexpr double kKeyRow = 17, kKeyText = 11, kKeyTextLeft = 30;

PlKey pl_key(cairo_t* cr, const std::string& relation, const FigureSummary& s) {
  PlKey key;
  key.outliers = s.likely_outlier_points > 0;
  key.texts.push_back(fmt::format("used in the fit ({})", s.used_points - s.likely_outlier_points));
  if (key.outliers)
    key.texts.push_back(
        fmt::format("likely outlier, membership < 0.5 ({})", s.likely_outlier_points));
  key.texts.push_back(fmt::format("refused ({})", s.rejected_points));
  key.texts.push_back(fmt::format("{} relation at [Fe/H] = 0, \u00b1\u03c3_int", relation));
  key.texts.push_back("parallax \u2212 error \u2264 0: no bright limit");
  double widest = 0;
  for (const auto& t : key.texts)
    widest = std::max(widest, text_extents(cr, t, kKeyText).x_advance);
  key.width = kKeyTextLeft + widest + 10;
  key.height = (static_cast<double>(key.texts.size()) + 0.6) * kKeyRow;
  return key;
}

void draw_pl_key(cairo_t* cr, const PlKey& key, double x, double y) {
  cairo_set_source_rgba(cr, 1, 1, 1, 0.92);
  cairo_rectangle(cr, x, y, key.width, key.height);
  cairo_fill_preserve(cr);
  cairo_set_source_rgb(cr, 0.6, 0.6, 0.6);
  cairo_set_line_width(cr, 0.8);
  cairo_stroke(cr);
  const double mx = x + 14, tx = x + kKeyTextLeft;
  std::size_t row = 0;
  auto centre = [&] { return y + kKeyRow * (0.8 + static_cast<double>(row)); };
  marker(cr, mx, centre(), Mark::kUsed);
  text(cr, tx, centre(), key.texts[row], kKeyText, 0.0, 0.5);
  if (key.outliers) {
    ++row;
    marker(cr, mx, centre(), Mark::kLikelyOutlier);
    text(cr, tx, centre(), key.texts[row], kKeyText, 0.0, 0.5);
  }
  ++row;
  marker(cr, mx, centre(), Mark::kRefused);
  text(cr, tx, centre(), key.texts[row], kKeyText, 0.0, 0.5);
  ++row;
  cairo_set_source_rgba(cr, kGrey[0], kGrey[1], kGrey[2], 0.35);
  cairo_rectangle(cr, mx - 9, centre() - 5, 18, 10);
  cairo_fill(cr);
  cairo_set_source_rgb(cr, 0, 0, 0);
  cairo_set_line_width(cr, 1.5);
  cairo_move_to(cr, mx - 9, centre());
  cairo_line_to(cr, mx + 9, centre());
  cairo_stroke(cr);
  text(cr, tx, centre(), key.texts[row], kKeyText, 0.0, 0.5);
  ++row;
  cairo_set_source_rgba(cr, 0.3, 0.3, 0.3, 0.8);
  cairo_set_line_width(cr, 0.9);
  const double ay = centre() - 5;
  cairo_move_to(cr, mx, ay + 10);
  cairo_line_to(cr, mx, ay);
  cairo_move_to(cr, mx - 3, ay + 5);
  cairo_line_to(cr, mx, ay);
  cairo_line_to(cr, mx + 3, ay + 5);
  cairo_stroke(cr);
  text(cr, tx, centre(), key.texts[row], kKeyText, 0.0, 0.5);
}

// What a key inside the plot box must not cover, in units: each star's marker and error
// bar (an open bar's arrow is its bright end), clipped to the box.
std::vector<FigureBox> pl_ink(const Panel& top, const std::vector<Point>& pts) {
  constexpr double kMarker = 5.0;  // the largest marker's half-size with its line
  std::vector<FigureBox> ink;
  for (const auto& p : pts) {
    const double x = top.px(p.x), y = top.py(p.y);
    ink.push_back({x - kMarker, y - kMarker, x + kMarker, y + kMarker});
    const double a = top.py(p.lo), b = top.py(p.hi);
    ink.push_back(
        {x - 3, std::max(top.top, std::min(a, b)), x + 3, std::min(top.bottom, std::max(a, b))});
  }
  return ink;
}

// True when the relation's scatter band crosses the box (units): the band is straight, so
// its extremes over the box's width are at the box's two sides.
bool band_crosses(const Panel& top, const Relation& rel, const FigureBox& box) {
  auto x_of = [&](double u) {
    return top.x0 + (u - top.left) / (top.right - top.left) * (top.x1 - top.x0);
  };
  double lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (double u : {box.left, box.right})
    for (double d : {-rel.sigma, rel.sigma}) {
      const double v = top.py(rel.at(x_of(u)) + d);
      lo = std::min(lo, v), hi = std::max(hi, v);
    }
  return lo - 2 <= box.bottom && box.top <= hi + 2;
}

// The first corner of the plot box where the key covers no star, error bar or the relation:
// lower right first (faint long-period stars are rare), then upper left, lower left, upper
// right. None when every corner holds something, as in a column-wide figure of a
// well-sampled relation, whose faint short-period stars and long error bars fill the box.
std::optional<FigureBox> free_corner(const Panel& top, const std::vector<FigureBox>& ink,
                                     const Relation& rel, const PlKey& key) {
  constexpr double kInset = 8;
  const double left = top.left + kInset, right = top.right - kInset - key.width;
  const double upper = top.top + kInset, lower = top.bottom - kInset - key.height;
  if (right < left || lower < upper) return std::nullopt;
  for (auto [x, y] : {std::pair{right, lower}, std::pair{left, upper}, std::pair{left, lower},
                      std::pair{right, upper}}) {
    const FigureBox box{x, y, x + key.width, y + key.height};
    bool covers = band_crosses(top, rel, box);
    for (const auto& b : ink) covers = covers || box.touches(b);
    if (!covers) return box;
  }
  return std::nullopt;
}

}  // namespace

FigureSummary pl_diagram(const Calibration& cal, const std::string& relation, const StarTable& res,
                         FigureFormat format, const std::string& path, FigureWidth width) {
  const Canvas canvas = canvas_for(width);
  const FitRelationRecord rel = cal.relation_record(relation);
  const double offset = parameter(rel, "parallax_offset_mas");
  const Relation line{parameter(rel, "alpha"), parameter(rel, "beta"), rel.pivot_log_period,
                      parameter(rel, "sigma_int")};
  std::vector<Point> pts;
  FigureSummary s;
  for (std::size_t i = 0; i < res.rows(); ++i) {
    if (res.column("relation").text[i] != relation || res.column("m0").is_null(i) ||
        res.column("log_period_f").is_null(i))
      continue;
    const std::string kind = res.column("kind").is_null(i) ? "" : res.column("kind").text[i];
    const double m0 = res.column("m0").real[i], x = res.column("log_period_f").real[i];
    Point p{x,
            0,
            0,
            0,
            res.column("residual").is_null(i) ? NAN : res.column("residual").real[i],
            res.column("used").boolean[i] != 0,
            false};
    if (kind == kCalibratorKindNames.name(CalibratorKind::kParallax) &&
        !res.column("parallax_corrected_mas").is_null(i)) {
      const double pi = res.column("parallax_corrected_mas").real[i] - offset,
                   e = res.column("parallax_err_mas").real[i];
      if (!(pi > 0)) {  // no magnitude to plot: counted and said in the title
        ++s.not_drawn_points;
        continue;
      }
      auto abs_mag = [&](double q) { return m0 - 5.0 * std::log10(100.0 / q); };
      p.y = abs_mag(pi);
      p.lo = abs_mag(pi + e);  // a larger parallax: a nearer, so intrinsically fainter, star
      p.open_below = pi - e <= 0;
      p.hi = p.open_below ? p.y - 2.0 : abs_mag(pi - e);
    } else if (!res.column("predicted").is_null(i) && !res.column("abs_mag_model").is_null(i)) {
      const double mu = res.column("predicted").real[i] - res.column("abs_mag_model").real[i];
      p.y = m0 - mu;
      const double e = res.column("m0_err").is_null(i) ? 0 : res.column("m0_err").real[i];
      p.lo = p.y + e, p.hi = p.y - e;
    } else {
      continue;
    }
    p.mark =
        !p.used ? Mark::kRefused : (likely_outlier(res, i) ? Mark::kLikelyOutlier : Mark::kUsed);
    pts.push_back(p);
    (p.used ? s.used_points : s.rejected_points) += 1;
    s.likely_outlier_points += p.mark == Mark::kLikelyOutlier ? 1 : 0;
  }
  if (pts.empty())
    throw InputError({path, {}, relation, "row", "relation"}, "no_rows_left", "no star to plot");
  double xmin = 1e9, xmax = -1e9, ymin = 1e9, ymax = -1e9;
  for (const auto& p : pts)
    xmin = std::min(xmin, p.x), xmax = std::max(xmax, p.x), ymin = std::min(ymin, p.y),
    ymax = std::max(ymax, p.y);
  const double padx = 0.05 * (xmax - xmin + 0.1), pady = 0.08 * (ymax - ymin + 0.5);
  AtomicOutput out(path);
  auto surface = open_surface(format, out.reopen_path(), canvas);
  cairo_t* cr = surface->cr;

  // Layout, top down: the title (and the count of stars not drawn, on a line of its own: a
  // column-wide figure has no room beside the title), the PL panel, the residual panel, its
  // axis labels, with no blank strip at the foot (issue 20). The key sits in a corner of the
  // PL panel where it covers nothing, else above the panel, beside the title or under it.
  std::vector<std::string> title = {fmt::format("{}  {}", cal.label(), relation)};
  if (s.not_drawn_points > 0)
    title.push_back(fmt::format("not drawn: {} (parallax \u2264 0)", s.not_drawn_points));
  const double title_bottom = kTitleTop + kTitleLine * static_cast<double>(title.size());
  const double residual_bottom = canvas.height - kBelowXAxis - kFootMargin;
  Panel bottom{kPanelLeft,
               canvas.width - kPanelRightMargin,
               residual_bottom - 120,
               residual_bottom,
               xmin - padx,
               xmax + padx,
               -4.5,
               4.5,
               false};
  Panel top{bottom.left,     bottom.right, title_bottom + kPanelGap,
            bottom.top - 20, bottom.x0,    bottom.x1,
            ymin - pady,     ymax + pady,  true};
  const PlKey key = pl_key(cr, relation, s);
  FigureBox key_box;
  if (auto corner = free_corner(top, pl_ink(top, pts), line, key)) {
    key_box = *corner;
  } else {
    const bool beside = top.left + title_width(cr, title) + 16 + key.width <= top.right;
    const double key_top = beside ? kTitleTop : title_bottom;
    key_box = {top.right - key.width, key_top, top.right, key_top + key.height};
    top.top = std::max(title_bottom, key_box.bottom) + kPanelGap;
  }

  // The relation and its intrinsic-scatter band, clipped to the plot box.
  cairo_save(cr);
  cairo_rectangle(cr, top.left, top.top, top.right - top.left, top.bottom - top.top);
  cairo_clip(cr);
  cairo_set_source_rgba(cr, kGrey[0], kGrey[1], kGrey[2], 0.35);
  cairo_move_to(cr, top.px(top.x0), top.py(line.at(top.x0) - line.sigma));
  cairo_line_to(cr, top.px(top.x1), top.py(line.at(top.x1) - line.sigma));
  cairo_line_to(cr, top.px(top.x1), top.py(line.at(top.x1) + line.sigma));
  cairo_line_to(cr, top.px(top.x0), top.py(line.at(top.x0) + line.sigma));
  cairo_close_path(cr);
  cairo_fill(cr);
  cairo_set_source_rgb(cr, 0, 0, 0);
  cairo_set_line_width(cr, 1.5);
  cairo_move_to(cr, top.px(top.x0), top.py(line.at(top.x0)));
  cairo_line_to(cr, top.px(top.x1), top.py(line.at(top.x1)));
  cairo_stroke(cr);
  for (const auto& p : pts) {
    cairo_set_source_rgba(cr, 0.3, 0.3, 0.3, 0.8);
    cairo_set_line_width(cr, 0.9);
    cairo_move_to(cr, top.px(p.x), top.py(std::max(p.lo, p.hi)));
    cairo_line_to(cr, top.px(p.x), top.py(std::min(p.lo, p.hi)));
    cairo_stroke(cr);
    if (p.open_below) {  // an arrow: the parallax allows any brighter magnitude
      double ax = top.px(p.x), ay = top.py(p.hi);
      cairo_move_to(cr, ax - 3, ay + 5);
      cairo_line_to(cr, ax, ay);
      cairo_line_to(cr, ax + 3, ay + 5);
      cairo_stroke(cr);
    }
    marker(cr, top.px(p.x), top.py(p.y), p.mark);
  }
  cairo_restore(cr);
  draw_pl_key(cr, key, key_box.left, key_box.top);
  s.legend_left = key_box.left, s.legend_top = key_box.top, s.legend_right = key_box.right,
  s.legend_bottom = key_box.bottom;
  std::vector<FigureBox> ink =
      axes(cr, top, "", fmt::format("M in {} (mag)", relation), false).labels;
  // Residuals.
  cairo_set_source_rgb(cr, 0, 0, 0);
  cairo_set_line_width(cr, 0.8);
  cairo_move_to(cr, bottom.left, bottom.py(0));
  cairo_line_to(cr, bottom.right, bottom.py(0));
  cairo_stroke(cr);
  for (const auto& p : pts)
    if (std::isfinite(p.r))
      marker(cr, bottom.px(p.x), bottom.py(std::clamp(p.r, -4.4, 4.4)), p.mark);
  for (const auto& b : axes(cr, bottom, "log10 P (days)", "r / sigma").labels) ink.push_back(b);
  for (const auto& b : title_lines(cr, top.left, title)) ink.push_back(b);
  commit_figure(std::move(surface), out, path);
  record_plot_box(s, top, canvas);
  record_panel(s, top, "", canvas);
  record_panel(s, bottom, "log10 P (days)", canvas);
  record_labels(s, ink, canvas);
  return s;
}

FigureSummary residual_trends(const Calibration& cal, const std::string& relation,
                              const StarTable& res, FigureFormat format, const std::string& path,
                              FigureWidth width) {
  const Canvas canvas = canvas_for(width);
  struct Series {
    std::string label;  // the x axis's title
    std::string name;   // what the note calls the panel when it is left out
    std::vector<double> x, r;
    std::vector<bool> used;
  };
  // [Fe/H] for a metallicity term the fit lacks; Gaia G (the catalog's gaia_g_mag, the
  // zero point's magnitude input) for a zero point that varies with magnitude; parallax S/N
  // for a residual offset or error inflation.
  std::vector<Series> panels = {{"[Fe/H] (dex)", "[Fe/H]", {}, {}, {}},
                                {"Gaia G (mag)", "G", {}, {}, {}},
                                {"parallax / error", "parallax S/N", {}, {}, {}}};
  const double offset = parameter(cal.relation_record(relation), "parallax_offset_mas");
  FigureSummary s;
  for (std::size_t i = 0; i < res.rows(); ++i) {
    if (res.column("relation").text[i] != relation || res.column("residual").is_null(i)) continue;
    const double r = res.column("residual").real[i];
    const bool used = res.column("used").boolean[i] != 0;
    auto add = [&](Series& p, const char* col, double transform_offset, bool snr) {
      if (!res.has(col) || res.column(col).is_null(i)) return;
      double x = res.column(col).real[i];
      if (snr) {
        if (res.column("parallax_err_mas").is_null(i)) return;
        x = (x - transform_offset) / res.column("parallax_err_mas").real[i];
      }
      if (!std::isfinite(x)) return;
      p.x.push_back(x), p.r.push_back(r), p.used.push_back(used);
    };
    add(panels[0], "feh", 0, false);
    add(panels[1], "gaia_g_mag", 0, false);
    add(panels[2], "parallax_corrected_mas", offset, true);
    (used ? s.used_points : s.rejected_points) += 1;
  }
  std::vector<Series*> shown;
  std::vector<std::string> left_out;
  for (auto& p : panels) p.x.empty() ? left_out.push_back(p.name) : shown.push_back(&p);
  if (shown.empty())
    throw InputError({path, {}, relation, "row", "relation"}, "no_rows_left",
                     "no residual with [Fe/H], G or a parallax");
  // A panel left out is said, so that a reader of the figure alone knows it is not an
  // oversight (G comes from the catalog's gaia_g column, which an ingest may not map).
  if (!left_out.empty()) {
    std::string names;
    for (std::size_t k = 0; k < left_out.size(); ++k)
      names += (k == 0 ? "" : k + 1 == left_out.size() ? " or " : ", ") + left_out[k];
    s.note = fmt::format("not shown: no star has {}", names);
  }
  std::vector<std::string> title = {fmt::format("{}  {}  residuals", cal.label(), relation)};
  if (!s.note.empty()) title.push_back(s.note);
  AtomicOutput out(path);
  auto surface = open_surface(format, out.reopen_path(), canvas);
  cairo_t* cr = surface->cr;
  // Panels of equal height from under the title to the foot, each followed by its own tick
  // labels and axis title: nothing touches the next panel, and no blank strip is left.
  const double n = static_cast<double>(shown.size());
  const double first_top = kTitleTop + kTitleLine * static_cast<double>(title.size()) + kPanelGap;
  const double stride_extra = kBelowXAxis + kPanelGap;
  const double height =
      (canvas.height - kFootMargin - first_top - n * kBelowXAxis - (n - 1) * kPanelGap) / n;
  std::vector<FigureBox> ink = title_lines(cr, kPanelLeft, title);
  for (std::size_t k = 0; k < shown.size(); ++k) {
    const Series& p = *shown[k];
    double lo = *std::min_element(p.x.begin(), p.x.end()),
           hi = *std::max_element(p.x.begin(), p.x.end());
    double pad = 0.05 * (hi - lo + 0.1);
    const double panel_top = first_top + static_cast<double>(k) * (height + stride_extra);
    const Panel panel{kPanelLeft, canvas.width - kPanelRightMargin,
                      panel_top,  panel_top + height,
                      lo - pad,   hi + pad,
                      -4.5,       4.5,
                      false};
    cairo_set_source_rgb(cr, 0, 0, 0);
    cairo_set_line_width(cr, 0.8);
    cairo_move_to(cr, panel.left, panel.py(0));
    cairo_line_to(cr, panel.right, panel.py(0));
    cairo_stroke(cr);
    for (std::size_t i = 0; i < p.x.size(); ++i)
      marker(cr, panel.px(p.x[i]), panel.py(std::clamp(p.r[i], -4.4, 4.4)), p.used[i]);
    for (const auto& b : axes(cr, panel, p.label, "r / sigma").labels) ink.push_back(b);
    if (k == 0) record_plot_box(s, panel, canvas);
    record_panel(s, panel, p.label, canvas);
  }
  record_labels(s, ink, canvas);
  commit_figure(std::move(surface), out, path);
  return s;
}

FigureSummary version_trend(const std::vector<Calibration>& versions, const std::string& relation,
                            FigureFormat format, const std::string& path, FigureWidth width) {
  const Canvas canvas = canvas_for(width);
  FigureSummary s;
  std::vector<double> v, a, ae, o, oe;
  for (const auto& c : versions) {
    const FitRelationRecord rel = c.relation_record(relation);
    v.push_back(c.version());
    a.push_back(parameter(rel, "alpha")), ae.push_back(parameter_error(rel, "alpha"));
    // In mas, as in the tables and the calibration file (issue 20: one unit everywhere).
    o.push_back(parameter(rel, "parallax_offset_mas")),
        oe.push_back(parameter_error(rel, "parallax_offset_mas"));
  }
  auto range = [](const std::vector<double>& y, const std::vector<double>& e) {
    double lo = 1e9, hi = -1e9;
    for (std::size_t i = 0; i < y.size(); ++i)
      lo = std::min(lo, y[i] - e[i]), hi = std::max(hi, y[i] + e[i]);
    double pad = 0.1 * (hi - lo + 1e-3);
    return std::pair{lo - pad, hi + pad};
  };
  const double x0 = *std::min_element(v.begin(), v.end()) - 0.5,
               x1 = *std::max_element(v.begin(), v.end()) + 0.5;
  auto [a0, a1] = range(a, ae);
  auto [o0, o1] = range(o, oe);
  // Title above the plot boxes, the two panels sharing the height down to the bottom
  // panel's x axis labels at the foot; the gap between them is narrower than a blank strip
  // a reader would notice, and wider than two tick labels at the frames' meeting edges.
  constexpr double kBetweenPanels = 16;
  const std::vector<std::string> title = {fmt::format("{}  {}", versions.back().name(), relation)};
  const double first_top = kTitleTop + kTitleLine * static_cast<double>(title.size()) + kPanelGap;
  const double last_bottom = canvas.height - kBelowXAxis - kFootMargin;
  const double height = (last_bottom - first_top - kBetweenPanels) / 2;
  const double right = canvas.width - kPanelRightMargin;
  Panel top{kPanelLeft, right, first_top, first_top + height, x0, x1, a0, a1, true};
  Panel bottom{kPanelLeft, right, last_bottom - height, last_bottom, x0, x1, o0, o1, false};
  AtomicOutput out(path);
  auto surface = open_surface(format, out.reopen_path(), canvas);
  cairo_t* cr = surface->cr;
  auto series = [&](const Panel& p, const std::vector<double>& y, const std::vector<double>& e) {
    for (std::size_t i = 0; i < y.size(); ++i) {
      cairo_set_source_rgb(cr, 0.3, 0.3, 0.3);
      cairo_set_line_width(cr, 1.0);
      cairo_move_to(cr, p.px(v[i]), p.py(y[i] - e[i]));
      cairo_line_to(cr, p.px(v[i]), p.py(y[i] + e[i]));
      cairo_stroke(cr);
      marker(cr, p.px(v[i]), p.py(y[i]), true);
      ++s.used_points;
    }
  };
  series(top, a, ae);
  series(bottom, o, oe);
  std::vector<FigureBox> ink = axes(cr, top, "", "alpha (mag)", false, 1.0).labels;
  // Versions are whole numbers: no tick between two of them.
  for (const auto& b : axes(cr, bottom, "version", "parallax offset (mas)", true, 1.0).labels)
    ink.push_back(b);
  for (const auto& b : title_lines(cr, top.left, title)) ink.push_back(b);
  commit_figure(std::move(surface), out, path);
  record_plot_box(s, top, canvas);
  record_panel(s, top, "", canvas);
  record_panel(s, bottom, "version", canvas);
  record_labels(s, ink, canvas);
  return s;
}

}  // namespace rungcal
