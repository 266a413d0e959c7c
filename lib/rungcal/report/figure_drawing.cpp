// SPDX-License-Identifier: MIT
#include <cairo-pdf.h>
#include <cairo-svg.h>
#include <cairo.h>

#include <algorithm>
#include <cmath>
#include <memory>
#include <utility>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/report/figure_parts.hpp"

namespace rungcal {

std::string axis_number(double v) {
  std::string s = fmt::format("{:g}", v + 0.0);  // + 0.0: no "-0"
  if (!s.empty() && s[0] == '-') s.replace(0, 1, "\u2212");
  return s;
}

namespace figure_parts {
namespace {

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

FigureBox scaled(const FigureBox& b, double k) {
  return {k * b.left, k * b.top, k * b.right, k * b.bottom};
}

}  // namespace

Canvas canvas_for(FigureWidth w) {
  constexpr double kHeight = 640, kPrinted = 8.0 / 13.0, kPixelsPerPoint = 300.0 / 72.0;
  auto journal = [&](double inches) {
    return Canvas{inches * 72.0 / kPrinted, kHeight, kPrinted, kPrinted * kPixelsPerPoint};
  };
  switch (w) {
    case FigureWidth::kScreen:
      return {720, kHeight, 1.0, 1.0};
    case FigureWidth::kColumn:
      return journal(3.5);
    case FigureWidth::kTwoColumns:
      return journal(7.1);
  }
  return {720, kHeight, 1.0, 1.0};
}

std::unique_ptr<Surface> open_surface(FigureFormat f, const std::string& temp, const Canvas& c) {
  auto s = std::make_unique<Surface>();
  s->format = f;
  s->temp = temp;
  const double scale = f == FigureFormat::kPng ? c.pixels_per_unit : c.points_per_unit;
  switch (f) {
    case FigureFormat::kPdf:
      s->surface = cairo_pdf_surface_create(temp.c_str(), c.width * scale, c.height * scale);
      break;
    case FigureFormat::kSvg:
      s->surface = cairo_svg_surface_create(temp.c_str(), c.width * scale, c.height * scale);
      break;
    case FigureFormat::kPng:
      s->surface = cairo_image_surface_create(CAIRO_FORMAT_ARGB32,
                                              static_cast<int>(std::lround(c.width * scale)),
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

void commit_figure(std::unique_ptr<Surface> surface, AtomicOutput& out, const std::string& path) {
  finish_surface(*surface, path);
  surface.reset();
  out.commit();
}

void record_plot_box(FigureSummary& s, const Panel& p, const Canvas& c) {
  const double k = c.pixels_per_unit;
  s.box_left = k * p.left, s.box_right = k * p.right, s.box_top = k * p.top,
  s.box_bottom = k * p.bottom;
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

cairo_text_extents_t text_extents(cairo_t* cr, const std::string& s, double size) {
  cairo_save(cr);
  cairo_set_font_size(cr, size);
  cairo_text_extents_t e;
  cairo_text_extents(cr, s.c_str(), &e);
  cairo_restore(cr);
  return e;
}

FigureBox text(cairo_t* cr, double x, double y, const std::string& s, double size, double align_x,
               double align_y, bool vertical) {
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

AxisInk axes(cairo_t* cr, const Panel& p, const std::string& xlabel, const std::string& ylabel,
             bool x_numbers, double min_x_step, int y_ticks) {
  AxisInk ink;
  cairo_set_source_rgb(cr, 0, 0, 0);
  cairo_set_line_width(cr, 1.2);
  cairo_rectangle(cr, p.left, p.top, p.right - p.left, p.bottom - p.top);
  cairo_stroke(cr);
  double sx = std::max(tick_step(p.x0, p.x1), min_x_step),
         sy = tick_step(std::min(p.y0, p.y1), std::max(p.y0, p.y1), y_ticks);
  // A step of 5 can leave two numbers on an axis (G from 5.6 to 17.8: 10 and 15), too few to
  // read a trend's scale from; the next finer nice step gives at least three.
  auto ticks_within = [&](double step) {
    return std::floor(p.x1 / step + 1e-9) - std::ceil(p.x0 / step - 1e-9) + 1;
  };
  for (int finer = 0;
       finer < 3 && x_numbers && ticks_within(sx) < 3 && finer_step(sx) >= min_x_step; ++finer)
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
  for (double y = std::ceil(std::min(p.y0, p.y1) / sy) * sy; y <= std::max(p.y0, p.y1) + 1e-9;
       y += sy) {
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
void marker(cairo_t* cr, double x, double y, bool used) {
  marker(cr, x, y, used ? Mark::kUsed : Mark::kRefused);
}

void band_marker(cairo_t* cr, double x, double y, std::size_t band) {
  const double* c = kBandColours[band % 6];
  cairo_set_source_rgb(cr, c[0], c[1], c[2]);
  switch (band % 3) {
    case 0:
      cairo_arc(cr, x, y, 3.2, 0, 2 * M_PI);
      cairo_fill(cr);
      break;
    case 1:
      cairo_rectangle(cr, x - 3, y - 3, 6, 6);
      cairo_fill(cr);
      break;
    default:
      cairo_move_to(cr, x, y - 4);
      cairo_line_to(cr, x + 3.6, y + 2.6);
      cairo_line_to(cr, x - 3.6, y + 2.6);
      cairo_close_path(cr);
      cairo_fill(cr);
  }
}

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

}  // namespace figure_parts
}  // namespace rungcal
