// SPDX-License-Identifier: MIT
#pragma once

// The figures' drawing primitives, shared by the figure builders (figures.cpp draws the
// calibration's figures, light_curve_figure.cpp a star's light curve; figure_drawing.cpp
// holds the canvas, text, ticks, axes and markers). Not an interface of its own: include
// figures.hpp from outside the report module.

#include <cairo.h>

#include <cstddef>
#include <memory>
#include <string>
#include <vector>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/report/figures.hpp"

namespace rungcal::figure_parts {

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

Canvas canvas_for(FigureWidth w);

// Okabe & Ito colour-blind-safe palette.
inline constexpr double kBlue[3] = {0.0, 0.447, 0.698};
inline constexpr double kVermillion[3] = {0.835, 0.369, 0.0};
inline constexpr double kGrey[3] = {0.55, 0.55, 0.55};
// Okabe & Ito colours and a shape per band, in the order bands appear.
inline constexpr double kBandColours[][3] = {{0.0, 0.447, 0.698}, {0.835, 0.369, 0.0},
                                             {0.0, 0.62, 0.451},  {0.8, 0.475, 0.655},
                                             {0.902, 0.624, 0.0}, {0.337, 0.706, 0.914}};

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

// A white canvas drawing into temp, scaled so that the layout is drawn in units.
std::unique_ptr<Surface> open_surface(FigureFormat f, const std::string& temp, const Canvas& c);

// Finishes the drawing and moves the file into place (nothing half-written on failure).
void commit_figure(std::unique_ptr<Surface> surface, AtomicOutput& out, const std::string& path);

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

// The plot box in PNG pixels (the units times the canvas's pixels per unit), and the key's.
void record_plot_box(FigureSummary& s, const Panel& p, const Canvas& c);
void record_panel(FigureSummary& s, const Panel& p, const std::string& x_label, const Canvas& c);
void record_labels(FigureSummary& s, const std::vector<FigureBox>& ink, const Canvas& c);

// Extents of a text at a font size, before drawing it (a layout sizes its key by them).
cairo_text_extents_t text_extents(cairo_t* cr, const std::string& s, double size);

// Draws a text; returns the box its ink covers, in units, so that layouts can be checked
// for labels touching a plot box.
FigureBox text(cairo_t* cr, double x, double y, const std::string& s, double size, double align_x,
               double align_y, bool vertical = false);

// What axes() drew: the number of labelled y ticks, and every label's ink (units).
struct AxisInk {
  int y_ticks = 0;
  std::vector<FigureBox> labels;
};

// Below a panel with numbers on its x axis: tick labels to about 16 units, the axis title's
// ink to about 47 (its 15-unit glyphs start 28 units under the frame).
inline constexpr double kBelowXAxis = 48;
// The layouts' other measures, in units: title lines from the top of the canvas, 18 apart
// (13-unit text); the plot boxes 90 from the left (y tick labels and the y axis title) and
// 30 from the right; the space between a title or an axis title and the next plot box; the
// margin under the last axis title.
inline constexpr double kTitleTop = 8, kTitleLine = 18, kPanelLeft = 90, kPanelRightMargin = 30,
                        kPanelGap = 10, kFootMargin = 6;

// Draws the frame, ticks and labels.
AxisInk axes(cairo_t* cr, const Panel& p, const std::string& xlabel, const std::string& ylabel,
             bool x_numbers = true, double min_x_step = 0.0, int y_ticks = 5);

// How a star is drawn: used (a filled circle), used but more likely an outlier or a blend
// than a member of the hierarchical fit's relation (a ring), refused (an open square).
enum class Mark { kUsed, kLikelyOutlier, kRefused };

void marker(cairo_t* cr, double x, double y, Mark mark);
void marker(cairo_t* cr, double x, double y, bool used);

// A light curve's epoch of a band: its colour and shape in kBandColours' order.
void band_marker(cairo_t* cr, double x, double y, std::size_t band);

// A figure's title lines, drawn from the top of the canvas at the plot box's left; returns
// their ink.
std::vector<FigureBox> title_lines(cairo_t* cr, double left, const std::vector<std::string>& lines);

double title_width(cairo_t* cr, const std::vector<std::string>& lines);

}  // namespace rungcal::figure_parts
