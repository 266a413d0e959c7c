// SPDX-License-Identifier: MIT
#include "rungcal/report/figures.hpp"

#include <cairo-pdf.h>
#include <cairo-svg.h>
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
#include "rungcal/report/likely_outlier.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {
namespace {

// The layout is drawn in units: 720 x 640 of them, at one point (PDF, SVG) or one pixel
// (PNG) each, for the screen. A journal width keeps the height and the font sizes in units,
// narrows the layout to fit, and prints the units smaller: 8/13 pt each, so that 13-unit
// tick labels print at 8 pt, 15-unit axis labels at 9.2 pt and 11-unit keys at 6.8 pt;
// PNGs then have 300 pixels per inch.
struct Canvas {
  double width, height;    // in units
  double points_per_unit;  // PDF and SVG
  double pixels_per_unit;  // PNG
};

Canvas canvas_for(FigureWidth w) {
  constexpr double kHeight = 640, kPrinted = 8.0 / 13.0, kPixelsPerPoint = 300.0 / 72.0;
  auto journal = [&](double inches) {
    return Canvas{inches * 72.0 / kPrinted, kHeight, kPrinted, kPrinted * kPixelsPerPoint};
  };
  switch (w) {
    case FigureWidth::kScreen: return {720, kHeight, 1.0, 1.0};
    case FigureWidth::kColumn: return journal(3.5);
    case FigureWidth::kTwoColumns: return journal(7.1);
  }
  return {720, kHeight, 1.0, 1.0};
}
// Okabe & Ito colour-blind-safe palette.
constexpr double kBlue[3] = {0.0, 0.447, 0.698};
constexpr double kVermillion[3] = {0.835, 0.369, 0.0};
constexpr double kGrey[3] = {0.55, 0.55, 0.55};

struct Surface {
  cairo_surface_t* surface = nullptr;
  cairo_t* cr = nullptr;
  FigureFormat format;
  std::string temp;
  ~Surface() {
    if (cr) cairo_destroy(cr);
    if (surface) cairo_surface_destroy(surface);
  }
};

std::unique_ptr<Surface> open_surface(FigureFormat f, const std::string& temp, const Canvas& c) {
  auto s = std::make_unique<Surface>();
  s->format = f;
  s->temp = temp;
  const double scale = f == FigureFormat::kPng ? c.pixels_per_unit : c.points_per_unit;
  switch (f) {
    case FigureFormat::kPdf: s->surface = cairo_pdf_surface_create(temp.c_str(), c.width * scale, c.height * scale); break;
    case FigureFormat::kSvg: s->surface = cairo_svg_surface_create(temp.c_str(), c.width * scale, c.height * scale); break;
    case FigureFormat::kPng:
      s->surface = cairo_image_surface_create(CAIRO_FORMAT_ARGB32, static_cast<int>(std::lround(c.width * scale)),
                                              static_cast<int>(std::lround(c.height * scale)));
      break;
  }
  s->cr = cairo_create(s->surface);
  cairo_set_source_rgb(s->cr, 1, 1, 1);
  cairo_paint(s->cr);
  cairo_scale(s->cr, scale, scale);
  cairo_select_font_face(s->cr, "DejaVu Sans", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
  return s;
}

void finish_surface(Surface& s, const std::string& path) {
  cairo_destroy(s.cr);
  s.cr = nullptr;
  if (s.format == FigureFormat::kPng) {
    if (cairo_surface_write_to_png(s.surface, s.temp.c_str()) != CAIRO_STATUS_SUCCESS)
      throw WriteError({path, {}, {}}, "cairo could not write the PNG");
  }
  cairo_surface_finish(s.surface);
  if (cairo_surface_status(s.surface) != CAIRO_STATUS_SUCCESS)
    throw WriteError({path, {}, {}}, cairo_status_to_string(cairo_surface_status(s.surface)));
}

// "Nice" tick spacing: 1, 2 or 5 times a power of ten, about n ticks over the range.
double tick_step(double lo, double hi, int n = 6) {
  double raw = (hi - lo) / n, p = std::pow(10.0, std::floor(std::log10(raw)));
  for (double m : {1.0, 2.0, 5.0, 10.0})
    if (m * p >= raw) return m * p;
  return 10 * p;
}

// The nice step under a nice step: 5 -> 2 -> 1 -> 0.5 (times its power of ten).
double finer_step(double step) {
  const double p = std::pow(10.0, std::floor(std::log10(step) + 1e-9));
  const double m = std::round(step / p);
  return m >= 5 ? 2 * p : m >= 2 ? p : 0.5 * p;
}

struct Panel {
  double left, right, top, bottom;
  double x0, x1, y0, y1;
  bool y_inverted = false;  // magnitudes: brighter up
  double px(double x) const { return left + (x - x0) / (x1 - x0) * (right - left); }
  double py(double y) const {
    double f = (y - y0) / (y1 - y0);
    return y_inverted ? top + f * (bottom - top) : bottom - f * (bottom - top);
  }
};

// Finishes the drawing and moves the file into place (nothing half-written on failure).
void commit_figure(std::unique_ptr<Surface> surface, AtomicOutput& out, const std::string& path) {
  finish_surface(*surface, path);
  surface.reset();
  out.commit();
}

FigureBox scaled(const FigureBox& b, double k) {
  return {k * b.left, k * b.top, k * b.right, k * b.bottom};
}

// The plot box in PNG pixels (the units times the canvas's pixels per unit), and the key's.
void record_plot_box(FigureSummary& s, const Panel& p, const Canvas& c) {
  const double k = c.pixels_per_unit;
  s.box_left = k * p.left, s.box_right = k * p.right, s.box_top = k * p.top, s.box_bottom = k * p.bottom;
  s.x_min = p.x0, s.x_max = p.x1, s.y_min = p.y0, s.y_max = p.y1;
  s.y_inverted = p.y_inverted;
  s.legend_left *= k, s.legend_right *= k, s.legend_top *= k, s.legend_bottom *= k;
}

void record_panel(FigureSummary& s, const Panel& p, const std::string& x_label, const Canvas& c) {
  s.panels.push_back(
      {scaled({p.left, p.top, p.right, p.bottom}, c.pixels_per_unit), p.x0, p.x1, x_label});
}

void record_labels(FigureSummary& s, const std::vector<FigureBox>& ink, const Canvas& c) {
  for (const auto& b : ink) s.labels.push_back(scaled(b, c.pixels_per_unit));
}

// Extents of a text at a font size, before drawing it (a layout sizes its key by them).
cairo_text_extents_t text_extents(cairo_t* cr, const std::string& s, double size) {
  cairo_save(cr);
  cairo_set_font_size(cr, size);
  cairo_text_extents_t e;
  cairo_text_extents(cr, s.c_str(), &e);
  cairo_restore(cr);
  return e;
}

// Draws a text; returns the box its ink covers, in units, so that layouts can be checked
// for labels touching a plot box.
FigureBox text(cairo_t* cr, double x, double y, const std::string& s, double size, double align_x,
               double align_y, bool vertical = false) {
  const cairo_text_extents_t e = text_extents(cr, s, size);
  cairo_save(cr);
  cairo_set_font_size(cr, size);
  cairo_move_to(cr, x, y);
  if (vertical) cairo_rotate(cr, -M_PI / 2);
  cairo_rel_move_to(cr, -e.width * align_x - e.x_bearing, e.height * align_y);
  cairo_set_source_rgb(cr, 0, 0, 0);
  cairo_show_text(cr, s.c_str());
  cairo_restore(cr);
  // Ink in the text's own frame: u along the baseline, v down from the start point.
  const double u0 = -e.width * align_x, u1 = u0 + e.width;
  const double v0 = e.height * align_y + e.y_bearing, v1 = v0 + e.height;
  if (!vertical) return {x + u0, y + v0, x + u1, y + v1};
  return {x + v0, y - u1, x + v1, y - u0};  // turned a quarter left: (u, v) -> (v, -u)
}

}  // namespace

std::string axis_number(double v) {
  std::string s = fmt::format("{:g}", v + 0.0);  // + 0.0: no "-0"
  if (!s.empty() && s[0] == '-') s.replace(0, 1, "\u2212");
  return s;
}

namespace {

// What axes() drew: the number of labelled y ticks, and every label's ink (units).
struct AxisInk {
  int y_ticks = 0;
  std::vector<FigureBox> labels;
};

// Below a panel with numbers on its x axis: tick labels to about 16 units, the axis title's
// ink to about 47 (its 15-unit glyphs start 28 units under the frame).
constexpr double kBelowXAxis = 48;
// The layouts' other measures, in units: title lines from the top of the canvas, 18 apart
// (13-unit text); the plot boxes 90 from the left (y tick labels and the y axis title) and
// 30 from the right; the space between a title or an axis title and the next plot box; the
// margin under the last axis title.
constexpr double kTitleTop = 8, kTitleLine = 18, kPanelLeft = 90, kPanelRightMargin = 30,
                 kPanelGap = 10, kFootMargin = 6;

// Draws the frame, ticks and labels.
AxisInk axes(cairo_t* cr, const Panel& p, const std::string& xlabel, const std::string& ylabel,
             bool x_numbers = true, double min_x_step = 0.0, int y_ticks = 5) {
  AxisInk ink;
  cairo_set_source_rgb(cr, 0, 0, 0);
  cairo_set_line_width(cr, 1.2);
  cairo_rectangle(cr, p.left, p.top, p.right - p.left, p.bottom - p.top);
  cairo_stroke(cr);
  double sx = std::max(tick_step(p.x0, p.x1), min_x_step), sy = tick_step(std::min(p.y0, p.y1), std::max(p.y0, p.y1), y_ticks);
  // A step of 5 can leave two numbers on an axis (G from 5.6 to 17.8: 10 and 15), too few to
  // read a trend's scale from; the next finer nice step gives at least three.
  auto ticks_within = [&](double step) {
    return std::floor(p.x1 / step + 1e-9) - std::ceil(p.x0 / step - 1e-9) + 1;
  };
  for (int finer = 0; finer < 3 && x_numbers && ticks_within(sx) < 3 && finer_step(sx) >= min_x_step; ++finer)
    sx = finer_step(sx);
  for (double x = std::ceil(p.x0 / sx) * sx; x <= p.x1 + 1e-9; x += sx) {
    cairo_move_to(cr, p.px(x), p.bottom);
    cairo_line_to(cr, p.px(x), p.bottom - 6);
    cairo_stroke(cr);
    if (x_numbers)
      ink.labels.push_back(
          text(cr, p.px(x), p.bottom + 6, axis_number(std::round(x / sx) * sx), 13, 0.5, 1.0));
  }
  double tick_labels_left = p.left;
  for (double y = std::ceil(std::min(p.y0, p.y1) / sy) * sy; y <= std::max(p.y0, p.y1) + 1e-9; y += sy) {
    cairo_move_to(cr, p.left, p.py(y));
    cairo_line_to(cr, p.left + 6, p.py(y));
    cairo_stroke(cr);
    ink.labels.push_back(
        text(cr, p.left - 6, p.py(y), axis_number(std::round(y / sy) * sy), 13, 1.0, 0.5));
    tick_labels_left = std::min(tick_labels_left, ink.labels.back().left);
    ++ink.y_ticks;
  }
  if (!xlabel.empty())
    ink.labels.push_back(text(cr, (p.left + p.right) / 2, p.bottom + 28, xlabel, 15, 0.5, 1.0));
  // The y title keeps its usual place unless a wide tick label (-0.015) reaches it;
  // then it moves left to stand 6 units clear of the widest one.
  const cairo_text_extents_t e = text_extents(cr, ylabel, 15);
  const double title_x = std::min(p.left - 52, tick_labels_left - 6 - (e.y_bearing + e.height));
  ink.labels.push_back(text(cr, title_x, (p.top + p.bottom) / 2, ylabel, 15, 0.5, 0.0, true));
  return ink;
}

// How a star is drawn: used (a filled circle), used but more likely an outlier or a blend
// than a member of the hierarchical fit's relation (a ring), refused (an open square).
enum class Mark { kUsed, kLikelyOutlier, kRefused };

void marker(cairo_t* cr, double x, double y, Mark mark) {
  if (mark == Mark::kUsed) {
    cairo_set_source_rgb(cr, kBlue[0], kBlue[1], kBlue[2]);
    cairo_arc(cr, x, y, 3.6, 0, 2 * M_PI);
    cairo_fill(cr);
  } else if (mark == Mark::kLikelyOutlier) {
    cairo_set_source_rgb(cr, kBlue[0], kBlue[1], kBlue[2]);
    cairo_set_line_width(cr, 1.4);
    cairo_new_path(cr);  // else the arc joins the last point drawn
    cairo_arc(cr, x, y, 4.2, 0, 2 * M_PI);
    cairo_stroke(cr);
  } else {
    cairo_set_source_rgb(cr, kVermillion[0], kVermillion[1], kVermillion[2]);
    cairo_set_line_width(cr, 1.6);
    cairo_rectangle(cr, x - 4, y - 4, 8, 8);
    cairo_stroke(cr);
  }
}
void marker(cairo_t* cr, double x, double y, bool used) { marker(cr, x, y, used ? Mark::kUsed : Mark::kRefused); }

double parameter(const nlohmann::json& rel, const std::string& name, double fallback = 0.0) {
  for (const auto& p : rel.at("parameters"))
    if (p.at("name") == name) return p.at("value").get<double>();
  return fallback;
}

double parameter_error(const nlohmann::json& rel, const std::string& name) {
  for (const auto& p : rel.at("parameters"))
    if (p.at("name") == name) return p.at("error").is_null() ? 0.0 : p.at("error").get<double>();
  return 0.0;
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

// A figure's title lines, drawn from the top of the canvas at the plot box's left; returns
// their ink.
std::vector<FigureBox> title_lines(cairo_t* cr, double left,
                                   const std::vector<std::string>& lines) {
  std::vector<FigureBox> ink;
  for (std::size_t i = 0; i < lines.size(); ++i)
    ink.push_back(
        text(cr, left, kTitleTop + kTitleLine * static_cast<double>(i), lines[i], 13, 0.0, 1.0));
  return ink;
}

double title_width(cairo_t* cr, const std::vector<std::string>& lines) {
  double w = 0;
  for (const auto& l : lines) w = std::max(w, text_extents(cr, l, 13).x_advance);
  return w;
}

}  // namespace

FigureSummary pl_diagram(const Calibration& cal, const std::string& relation, const StarTable& res, FigureFormat format,
                         const std::string& path, FigureWidth width) {
  const Canvas canvas = canvas_for(width);
  const nlohmann::json& rel = cal.relation(relation);
  const double offset = parameter(rel, "parallax_offset_mas");
  const Relation line{parameter(rel, "alpha"), parameter(rel, "beta"),
                      rel.at("pivot_log_period").get<double>(), parameter(rel, "sigma_int")};
  std::vector<Point> pts;
  FigureSummary s;
  for (std::size_t i = 0; i < res.rows(); ++i) {
    if (res.column("relation").text[i] != relation || res.column("m0").is_null(i) || res.column("log_period_f").is_null(i)) continue;
    const std::string kind = res.column("kind").is_null(i) ? "" : res.column("kind").text[i];
    const double m0 = res.column("m0").real[i], x = res.column("log_period_f").real[i];
    Point p{x, 0, 0, 0, res.column("residual").is_null(i) ? NAN : res.column("residual").real[i], res.column("used").boolean[i] != 0, false};
    if (kind == "parallax" && !res.column("parallax_corrected_mas").is_null(i)) {
      const double pi = res.column("parallax_corrected_mas").real[i] - offset, e = res.column("parallax_err_mas").real[i];
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
    p.mark = !p.used ? Mark::kRefused : (likely_outlier(res, i) ? Mark::kLikelyOutlier : Mark::kUsed);
    pts.push_back(p);
    (p.used ? s.used_points : s.rejected_points) += 1;
    s.likely_outlier_points += p.mark == Mark::kLikelyOutlier ? 1 : 0;
  }
  if (pts.empty()) throw InputError({path, {}, relation, "row", "relation"}, "no_rows_left", "no star to plot");
  double xmin = 1e9, xmax = -1e9, ymin = 1e9, ymax = -1e9;
  for (const auto& p : pts) xmin = std::min(xmin, p.x), xmax = std::max(xmax, p.x), ymin = std::min(ymin, p.y), ymax = std::max(ymax, p.y);
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
    if (std::isfinite(p.r)) marker(cr, bottom.px(p.x), bottom.py(std::clamp(p.r, -4.4, 4.4)), p.mark);
  for (const auto& b : axes(cr, bottom, "log10 P (days)", "r / sigma").labels) ink.push_back(b);
  for (const auto& b : title_lines(cr, top.left, title)) ink.push_back(b);
  commit_figure(std::move(surface), out, path);
  record_plot_box(s, top, canvas);
  record_panel(s, top, "", canvas);
  record_panel(s, bottom, "log10 P (days)", canvas);
  record_labels(s, ink, canvas);
  return s;
}

FigureSummary residual_trends(const Calibration& cal, const std::string& relation, const StarTable& res, FigureFormat format,
                              const std::string& path, FigureWidth width) {
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
  const double offset = parameter(cal.relation(relation), "parallax_offset_mas");
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
  if (shown.empty()) throw InputError({path, {}, relation, "row", "relation"}, "no_rows_left", "no residual with [Fe/H], G or a parallax");
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
    double lo = *std::min_element(p.x.begin(), p.x.end()), hi = *std::max_element(p.x.begin(), p.x.end());
    double pad = 0.05 * (hi - lo + 0.1);
    const double panel_top = first_top + static_cast<double>(k) * (height + stride_extra);
    const Panel panel{kPanelLeft, canvas.width - kPanelRightMargin, panel_top, panel_top + height,
                      lo - pad, hi + pad, -4.5, 4.5, false};
    cairo_set_source_rgb(cr, 0, 0, 0);
    cairo_set_line_width(cr, 0.8);
    cairo_move_to(cr, panel.left, panel.py(0));
    cairo_line_to(cr, panel.right, panel.py(0));
    cairo_stroke(cr);
    for (std::size_t i = 0; i < p.x.size(); ++i) marker(cr, panel.px(p.x[i]), panel.py(std::clamp(p.r[i], -4.4, 4.4)), p.used[i]);
    for (const auto& b : axes(cr, panel, p.label, "r / sigma").labels) ink.push_back(b);
    if (k == 0) record_plot_box(s, panel, canvas);
    record_panel(s, panel, p.label, canvas);
  }
  record_labels(s, ink, canvas);
  commit_figure(std::move(surface), out, path);
  return s;
}

FigureSummary version_trend(const std::vector<Calibration>& versions, const std::string& relation, FigureFormat format,
                            const std::string& path, FigureWidth width) {
  const Canvas canvas = canvas_for(width);
  FigureSummary s;
  std::vector<double> v, a, ae, o, oe;
  for (const auto& c : versions) {
    const nlohmann::json& rel = c.relation(relation);
    v.push_back(c.version());
    a.push_back(parameter(rel, "alpha")), ae.push_back(parameter_error(rel, "alpha"));
    // In mas, as in the tables and the calibration file (issue 20: one unit everywhere).
    o.push_back(parameter(rel, "parallax_offset_mas")), oe.push_back(parameter_error(rel, "parallax_offset_mas"));
  }
  auto range = [](const std::vector<double>& y, const std::vector<double>& e) {
    double lo = 1e9, hi = -1e9;
    for (std::size_t i = 0; i < y.size(); ++i) lo = std::min(lo, y[i] - e[i]), hi = std::max(hi, y[i] + e[i]);
    double pad = 0.1 * (hi - lo + 1e-3);
    return std::pair{lo - pad, hi + pad};
  };
  const double x0 = *std::min_element(v.begin(), v.end()) - 0.5, x1 = *std::max_element(v.begin(), v.end()) + 0.5;
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

namespace {

// Okabe & Ito colours and a shape per band, in the order bands appear.
constexpr double kBandColours[][3] = {{0.0, 0.447, 0.698}, {0.835, 0.369, 0.0}, {0.0, 0.62, 0.451},
                                      {0.8, 0.475, 0.655}, {0.902, 0.624, 0.0}, {0.337, 0.706, 0.914}};

void band_marker(cairo_t* cr, double x, double y, std::size_t band) {
  const double* c = kBandColours[band % 6];
  cairo_set_source_rgb(cr, c[0], c[1], c[2]);
  switch (band % 3) {
    case 0: cairo_arc(cr, x, y, 3.2, 0, 2 * M_PI); cairo_fill(cr); break;
    case 1: cairo_rectangle(cr, x - 3, y - 3, 6, 6); cairo_fill(cr); break;
    default:
      cairo_move_to(cr, x, y - 4);
      cairo_line_to(cr, x + 3.6, y + 2.6);
      cairo_line_to(cr, x - 3.6, y + 2.6);
      cairo_close_path(cr);
      cairo_fill(cr);
  }
}

std::size_t row_of(const StarTable& t, const std::string& id) {
  for (std::size_t i = 0; i < t.rows(); ++i)
    if (t.column("id").text[i] == id) return i;
  return t.rows();
}

}  // namespace

LightCurveTables read_lightcurve_tables(const std::string& path) {
  LightCurveTables t;
  t.summary = read_fits_table(path, {"SUMMARY", 0}).table;
  t.fourier = read_fits_table(path, {"FOURIER", 0}).table;
  t.points = read_fits_table(path, {"POINTS", 0}).table;
  t.periodogram = read_fits_table(path, {"PERIODOGRAM", 0}).table;
  return t;
}

std::string light_curve_star_problem(const LightCurveTables& lc, const std::string& star) {
  const std::size_t row = row_of(lc.summary, star);
  if (row == lc.summary.rows() || lc.summary.column("period_d").is_null(row))
    return "the light-curve summary has no period for this star";
  for (std::size_t i = 0; i < lc.points.rows(); ++i)
    if (lc.points.column("id").text[i] == star) return "";
  return "the light-curve product has no epochs for this star";
}

FigureSummary light_curve_figure(const LightCurveTables& lc, const std::string& star, FigureFormat format,
                                 const std::string& path, FigureWidth width) {
  const Canvas canvas = canvas_for(width);
  const std::size_t row = row_of(lc.summary, star);
  if (row == lc.summary.rows() || lc.summary.column("period_d").is_null(row))
    throw InputError({path, {}, star, "row", "star"}, "no_rows_left", "the light-curve summary has no period for this star");
  const double period = lc.summary.column("period_d").real[row];
  const double frequency = 1.0 / period;
  const double t_ref = lc.summary.column("t_ref").real[row];
  const double phase_zero = (lc.summary.column("epoch_max").real[row] - t_ref) * frequency;

  // Points and each band's Fourier coefficients.
  std::vector<std::string> bands;
  struct Obs { double phase, mag, err; std::size_t band; };
  std::vector<Obs> obs;
  auto band_index = [&](const std::string& b) {
    auto it = std::find(bands.begin(), bands.end(), b);
    if (it != bands.end()) return static_cast<std::size_t>(it - bands.begin());
    bands.push_back(b);
    return bands.size() - 1;
  };
  for (std::size_t i = 0; i < lc.points.rows(); ++i)
    if (lc.points.column("id").text[i] == star)
      obs.push_back({lc.points.column("phase").real[i], lc.points.column("mag").real[i], lc.points.column("mag_err").real[i],
                     band_index(lc.points.column("band").text[i])});
  std::vector<std::vector<std::pair<double, double>>> coef(bands.size());
  for (std::size_t i = 0; i < lc.fourier.rows(); ++i) {
    if (lc.fourier.column("id").text[i] != star) continue;
    auto it = std::find(bands.begin(), bands.end(), lc.fourier.column("band").text[i]);
    if (it == bands.end()) continue;
    auto& c = coef[static_cast<std::size_t>(it - bands.begin())];
    const auto k = static_cast<std::size_t>(lc.fourier.column("harmonic").integer[i]);
    if (c.size() <= k) c.resize(k + 1);
    c[k] = {lc.fourier.column("cos_coef").real[i], lc.fourier.column("sin_coef").real[i]};
  }
  if (obs.empty()) throw InputError({path, {}, star, "row", "star"}, "no_rows_left", "the light-curve product has no epochs for this star");
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
  for (const auto& o : obs) ymin = std::min(ymin, o.mag - o.err), ymax = std::max(ymax, o.mag + o.err);
  for (std::size_t b = 0; b < bands.size(); ++b)  // the model's extremes, which epochs may miss
    for (int i = 0; i < 200 && !coef[b].empty(); ++i) ymin = std::min(ymin, model(b, i / 200.0)), ymax = std::max(ymax, model(b, i / 200.0));
  const double pad = 0.10 * (ymax - ymin + 0.1);  // the model and error bars clear the frame
  std::vector<double> freq, power;
  for (std::size_t i = 0; i < lc.periodogram.rows(); ++i)
    if (lc.periodogram.column("id").text[i] == star) {
      freq.push_back(lc.periodogram.column("frequency").real[i]);
      power.push_back(lc.periodogram.column("power").real[i]);
    }
  const bool with_periodogram = !freq.empty();
  Panel top{90, canvas.width - 30, 40, with_periodogram ? 370.0 : 570.0, 0.0, 2.0, ymin - pad, ymax + pad, true};
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
      i == 0 ? cairo_move_to(cr, top.px(ph), top.py(model(b, ph))) : cairo_line_to(cr, top.px(ph), top.py(model(b, ph)));
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
  const double legend_y = top.top - 16, legend_x = top.right - kEntry * static_cast<double>(bands.size());
  s.legend_left = legend_x, s.legend_right = top.right, s.legend_top = legend_y - 9, s.legend_bottom = legend_y + 9;
  for (std::size_t b = 0; b < bands.size(); ++b) {
    const double x = legend_x + 8 + kEntry * static_cast<double>(b);
    band_marker(cr, x, legend_y, b);
    text(cr, x + 10, legend_y, bands[b], 13, 0.0, 0.5);
  }
  text(cr, top.left + 10, top.top - 26, fmt::format("{}   P = {:.6f} d", star, period), 14, 0.0, 1.0);

  if (with_periodogram) {
    // Power against period (log scale): a period is what a reader looks for.
    double p0 = 1.0 / freq.back(), p1 = 1.0 / freq.front();
    Panel bottom{90, canvas.width - 30, 430, 580, std::log10(p0), std::log10(p1), 0.0, 1.0, false};
    cairo_save(cr);
    cairo_rectangle(cr, bottom.left, bottom.top, bottom.right - bottom.left, bottom.bottom - bottom.top);
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
