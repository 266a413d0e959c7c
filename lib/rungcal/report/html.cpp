// SPDX-License-Identifier: MIT
#include "rungcal/report/html.hpp"

#include <algorithm>
#include <cmath>

#include <fmt/format.h>

namespace rungcal {

std::string html_escape(std::string_view text) {
  std::string out;
  out.reserve(text.size());
  for (char c : text) {
    switch (c) {
      case '&':
        out += "&amp;";
        break;
      case '<':
        out += "&lt;";
        break;
      case '>':
        out += "&gt;";
        break;
      case '"':
        out += "&quot;";
        break;
      case '\'':
        out += "&#39;";
        break;
      default:
        out += c;
    }
  }
  return out;
}

std::string html_table(const HtmlTable& t) {
  std::string out = "<table>\n";
  if (!t.caption.empty()) out += "<caption>" + html_escape(t.caption) + "</caption>\n";
  out += "<thead><tr>";
  for (const auto& h : t.header) out += "<th scope=\"col\">" + html_escape(h) + "</th>";
  out += "</tr></thead>\n<tbody>\n";
  for (std::size_t r = 0; r < t.rows.size(); ++r) {
    const std::string cls = r < t.row_classes.size() ? t.row_classes[r] : "";
    out += cls.empty() ? "<tr>" : "<tr class=\"" + html_escape(cls) + "\">";
    for (const auto& cell : t.rows[r]) out += "<td>" + html_escape(cell) + "</td>";
    out += "</tr>\n";
  }
  return out + "</tbody>\n</table>\n";
}

namespace {

constexpr double kWidth = 320, kHeight = 150;
constexpr double kLeft = 64, kRight = 12, kTop = 24, kBottom = 30;

struct Range {
  double lo = 0, hi = 1;
};

Range value_range(const std::vector<HistoryPoint>& points) {
  Range r{INFINITY, -INFINITY};
  for (const auto& p : points) {
    const double e = std::isfinite(p.error) ? p.error : 0.0;
    r.lo = std::min(r.lo, p.value - e);
    r.hi = std::max(r.hi, p.value + e);
  }
  const double pad = r.hi > r.lo ? 0.08 * (r.hi - r.lo) : std::max(1e-3, 0.05 * std::abs(r.lo));
  return {r.lo - pad, r.hi + pad};
}

}  // namespace

std::string history_chart_svg(const std::string& title, const std::vector<HistoryPoint>& points) {
  std::string desc;
  for (const auto& p : points)
    desc += fmt::format("{}version {}: {:.5g}{}{}{}", desc.empty() ? "" : "; ", p.version, p.value,
                        std::isfinite(p.error) ? fmt::format(" ± {:.2g}", p.error) : "",
                        p.withdrawn ? " (withdrawn)" : "", p.alarm ? " (drift alarm)" : "");
  std::string out = fmt::format(
      "<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"history\" role=\"img\" width=\"{0}\" "
      "height=\"{1}\" viewBox=\"0 0 {0} {1}\">\n<title>{2}</title>\n<desc>{3}</desc>\n",
      kWidth, kHeight, html_escape(title), html_escape(desc));
  if (points.empty()) return out + "</svg>\n";
  const Range y = value_range(points);
  const int v0 = points.front().version, v1 = points.back().version;
  auto px = [&](int v) {
    return v1 == v0 ? (kLeft + kWidth - kRight) / 2
                    : kLeft + (v - v0) * (kWidth - kLeft - kRight) / static_cast<double>(v1 - v0);
  };
  auto py = [&](double value) {
    return kTop + (y.hi - value) * (kHeight - kTop - kBottom) / (y.hi - y.lo);
  };
  out += fmt::format("<text x=\"{}\" y=\"14\" class=\"chart-title\">{}</text>\n", kLeft,
                     html_escape(title));
  out += fmt::format("<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" class=\"frame\"/>\n",
                     kLeft, kTop, kWidth - kLeft - kRight, kHeight - kTop - kBottom);
  // Axis labels: the value range at the left, the first and last version below.
  out += fmt::format("<text x=\"{}\" y=\"{}\" class=\"tick\" text-anchor=\"end\">{:.4g}</text>\n",
                     kLeft - 4, kTop + 4, y.hi);
  out += fmt::format("<text x=\"{}\" y=\"{}\" class=\"tick\" text-anchor=\"end\">{:.4g}</text>\n",
                     kLeft - 4, kHeight - kBottom, y.lo);
  for (int v : {v0, v1})
    out += fmt::format("<text x=\"{}\" y=\"{}\" class=\"tick\" text-anchor=\"middle\">v{}</text>\n",
                       px(v), kHeight - kBottom + 14, v);
  for (const auto& p : points) {
    const double x = px(p.version);
    if (std::isfinite(p.error))
      out += fmt::format("<line x1=\"{0}\" x2=\"{0}\" y1=\"{1}\" y2=\"{2}\" class=\"bar\"/>\n", x,
                         py(p.value + p.error), py(p.value - p.error));
    std::string cls = "version-point";
    if (p.withdrawn) cls += " withdrawn";
    if (p.alarm) cls += " alarm";
    out += fmt::format("<circle cx=\"{}\" cy=\"{}\" r=\"4\" class=\"{}\" data-version=\"{}\"/>\n",
                       x, py(p.value), cls, p.version);
  }
  return out + "</svg>\n";
}

}  // namespace rungcal
