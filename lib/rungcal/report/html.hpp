// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <string_view>
#include <vector>

namespace rungcal {

// Text made safe inside HTML or SVG elements and attribute values (& < > " ').
std::string html_escape(std::string_view text);

// A table with a caption and column headers (th scope="col"); every cell is text, escaped
// here. A row class (e.g. "alarm", "withdrawn") marks a row for the style sheet and tests.
struct HtmlTable {
  std::string caption;
  std::vector<std::string> header;
  std::vector<std::vector<std::string>> rows;
  std::vector<std::string> row_classes;  // one per row, or empty
};
std::string html_table(const HtmlTable& table);

// One version of one parameter, for a history chart.
struct HistoryPoint {
  int version = 0;
  double value = 0, error = 0;  // error NaN: none
  bool withdrawn = false;       // drawn hollow
  bool alarm = false;           // moved more than the alarm threshold from the version before
};

// A small inline SVG chart of a parameter across versions: value against version number
// with 1-sigma bars. Accessible: role="img" with a title and a description listing every
// value; each point carries class "version-point" and data-version, so a browser test can
// count them.
std::string history_chart_svg(const std::string& title, const std::vector<HistoryPoint>& points);

}  // namespace rungcal
