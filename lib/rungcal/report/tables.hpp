// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <utility>
#include <vector>

#include "rungcal/calibration/calibration.hpp"
#include "rungcal/core/enum_table.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal {

// A value with its error, rounded for print by the usual convention: the error to two
// significant digits, the value to the same decimal place (common practice). NaN error:
// the value alone, to 4 decimals.
struct Rounded {
  std::string value, error;  // "" error when none
  int decimals = 0;
};
Rounded round_for_print(double value, double error);

// The table formats, each with the file extension it is written with: rungcal-report writes
// every table in every format of this table (a new format: an entry here and its branch in
// tables.cpp's render and cell).
enum class TableFormat { kLatex, kCsv, kMarkdown };
inline constexpr EnumTable<TableFormat, 3> kTableFormatExtensions{{{
    {TableFormat::kLatex, "tex"},
    {TableFormat::kCsv, "csv"},
    {TableFormat::kMarkdown, "md"},
}}};

// Which errors a relation table shows: the covariance's (inverse Hessian at the optimum),
// the bootstrap's (half the 16-84 percentile range), or both (the bootstrap's in parentheses).
enum class TableErrors { kCovariance, kBootstrap, kBoth };
inline constexpr EnumTable<TableErrors, 3> kTableErrorsNames{{{
    {TableErrors::kCovariance, "covariance"},
    {TableErrors::kBootstrap, "bootstrap"},
    {TableErrors::kBoth, "both"},
}}};

// The relation table: one row per relation and quantity (zero point, slope(s), metallicity
// term, parallax offset, intrinsic scatter, N), one column per calibration version, side
// by side. LaTeX is an AASTeX deluxetable. The caption gives the relation's equation, each
// relation's pivot log P0 and which errors are shown.
std::string relation_table(const std::vector<Calibration>& versions, TableFormat format,
                           TableErrors errors = TableErrors::kCovariance);

// Text safe in LaTeX's text mode: the ten special characters escaped (\ # $ % & _ { } ~ ^).
std::string escape_latex(const std::string& text);

// The per-star appendix of one relation from a residuals table (fit_residuals.fits): id,
// log P, magnitude, parallax with its error, normalised residual, used, and why not.
std::string star_table(const StarTable& residuals, const std::string& relation, TableFormat format);

// The systematic error budget of a rungcal-grid run (grid.json): per relation and
// parameter the baseline with its error, each category's quadrature sum of shifts, and the
// total, in the parameter's units and in baseline sigmas.
std::string error_budget_table(const nlohmann::json& budget, TableFormat format);

}  // namespace rungcal
