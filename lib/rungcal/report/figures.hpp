// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/calibration/calibration.hpp"
#include "rungcal/core/enum_table.hpp"
#include "rungcal/table/source_table.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// The figure formats, named by their file extension: rungcal-report draws every figure in
// every format of this table (a new format: an entry here and its cairo surface in
// figure_drawing.cpp).
enum class FigureFormat { kPdf, kPng, kSvg };
inline constexpr EnumTable<FigureFormat, 3> kFigureFormatNames{{{
    {FigureFormat::kPdf, "pdf"},
    {FigureFormat::kPng, "png"},
    {FigureFormat::kSvg, "svg"},
}}};

// The width a figure is drawn for. "column" and "two_columns" are a journal's single
// (3.5 in) and double (7.1 in) column: the layout is drawn at that width so that the tick
// labels print at 8 pt and the axis labels at 9 pt (legible at the printed size; the
// "screen" layout's 10 in would shrink them to about 4 pt in a column), and PNGs are 300
// dpi. "screen" is 10 x 8.9 in at 72 dpi (PNG 720 x 640 pixels), for the status page.
enum class FigureWidth { kScreen, kColumn, kTwoColumns };
inline constexpr EnumTable<FigureWidth, 3> kFigureWidthNames{{{
    {FigureWidth::kScreen, "screen"},
    {FigureWidth::kColumn, "column"},
    {FigureWidth::kTwoColumns, "two_columns"},
}}};

// A rectangle in output units (PNG pixels), top-down like the image.
struct FigureBox {
  double left = 0, top = 0, right = 0, bottom = 0;
  // True when the two share any area or edge (a label on a frame line touches it).
  bool touches(const FigureBox& other) const {
    return left <= other.right && other.left <= right && top <= other.bottom && other.top <= bottom;
  }
};

// One plot box of a figure and what its x axis shows.
struct FigurePanel {
  FigureBox box;
  double x_min = 0, x_max = 0;
  std::string x_label;
};

// Where a figure put things, for tests and for a caption.
struct FigureSummary {
  int used_points = 0, rejected_points = 0;
  int likely_outlier_points = 0;  // used stars drawn as likely outliers (membership < 0.5)
  int not_drawn_points = 0;       // PL diagram: stars with no magnitude to draw (parallax <= 0)
  double legend_left = 0, legend_right = 0, legend_top = 0, legend_bottom = 0;  // its key, if any
  int y_ticks = 0;  // labelled ticks on the top panel's y axis (light curves)
  // Plot box of the top panel in output units (PNG pixels), and its data ranges.
  double box_left = 0, box_right = 0, box_top = 0, box_bottom = 0;
  double x_min = 0, x_max = 0, y_min = 0, y_max = 0;
  bool y_inverted = false;  // magnitudes: brighter up
  // Every plot box drawn, top to bottom, and the ink of every label outside the key (title,
  // notes, tick labels, axis titles): no label may touch a plot box (issue 20).
  std::vector<FigurePanel> panels;
  std::vector<FigureBox> labels;
  std::string note;  // residual figure: the panels left out, and why ("" when none)
  double x_to_output(double x) const {
    return box_left + (x - x_min) / (x_max - x_min) * (box_right - box_left);
  }
  double y_to_output(double y) const {
    const double f = (y - y_min) / (y_max - y_min);
    return y_inverted ? box_top + f * (box_bottom - box_top)
                      : box_bottom - f * (box_bottom - box_top);
  }
};

// A tick label: "{:g}" with a true minus sign (U+2212), as typeset mathematics has it.
std::string axis_number(double value);

// The period-luminosity diagram of one relation (cairo): absolute magnitudes from the
// calibrators' corrected parallaxes (M = m0 - 5 log10(100 / (pi - offset)), asymmetric
// errors from pi -+ sigma_pi, an arrow where pi - sigma_pi <= 0; non-positive parallaxes are
// off the diagram and counted) or known distance moduli, against log P; the fitted relation
// at [Fe/H] = 0 with its intrinsic-scatter band; used stars as filled blue circles and
// rejected ones as open vermillion squares (Okabe & Ito colours: legible to colour-blind
// readers, and the shapes differ in greyscale), a key naming each with its count and the
// open-bar arrow, the band in the y label, the stars not drawn counted under the title; a
// panel of normalised residuals below. The title stands above the plot box; the key in the
// first corner of the box where it covers no star, error bar or the relation's band, else
// above the box (a column-wide figure of a well-sampled relation has no such corner).
FigureSummary pl_diagram(const Calibration& calibration, const std::string& relation,
                         const StarTable& residuals, FigureFormat format, const std::string& path,
                         FigureWidth width = FigureWidth::kScreen);

// Normalised residuals of a relation against [Fe/H], Gaia G (the residuals' gaia_g_mag)
// and parallax S/N, one panel each, where metallicity, zero-point and offset problems show
// as trends; used and refused stars marked as in pl_diagram. A panel no star has a value
// for is left out and named under the title (FigureSummary::note); the panels share the
// height from the title to the foot, each with its axis labels clear of the next.
FigureSummary residual_trends(const Calibration& calibration, const std::string& relation,
                              const StarTable& residuals, FigureFormat format,
                              const std::string& path, FigureWidth width = FigureWidth::kScreen);

// Zero point and parallax offset of a relation, version by version, with covariance errors:
// two panels sharing the version axis, the title above them, each y title clear of its
// widest tick label.
FigureSummary version_trend(const std::vector<Calibration>& versions, const std::string& relation,
                            FigureFormat format, const std::string& path,
                            FigureWidth width = FigureWidth::kScreen);

// The products of rungcal-lightcurve one figure needs (HDUs of its FITS file).
struct LightCurveTables {
  StarTable summary, fourier, points, periodogram;
};
// Reads SUMMARY, FOURIER, POINTS and PERIODOGRAM; throws InputError naming a missing HDU.
LightCurveTables read_lightcurve_tables(const std::string& path);

// "" when light_curve_figure can draw this star, else why not (no period, no epochs).
std::string light_curve_star_problem(const LightCurveTables& lc, const std::string& star);

// One star's light curve: the epochs of every band against phase (two cycles, maximum light
// of the star's first band at phase 0, magnitudes brighter up) with each band's Fourier
// model, bands told apart by Okabe & Ito colours and by marker shape; below, the
// periodogram against period with the adopted period marked (when it was kept).
FigureSummary light_curve_figure(const LightCurveTables& tables, const std::string& star,
                                 FigureFormat format, const std::string& path,
                                 FigureWidth width = FigureWidth::kScreen);

}  // namespace rungcal
