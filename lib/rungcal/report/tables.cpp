// SPDX-License-Identifier: MIT
#include "rungcal/report/tables.hpp"

#include <cmath>

#include <fmt/format.h>

#include "rungcal/report/likely_outlier.hpp"
#include "rungcal/table/error_budget_schema.hpp"
#include "rungcal/table/fit_residuals_schema.hpp"

namespace rungcal {
namespace {

struct Quantity {
  const char* parameter;
  const char* label;  // plain text
  const char* latex;  // LaTeX
};

const Quantity kQuantities[] = {
    {"alpha", "zero point alpha (mag)", "$\\alpha$ (mag)"},
    {"beta", "slope beta (mag/dex)", "$\\beta$ (mag dex$^{-1}$)"},
    {"beta_long", "long-period slope (mag/dex)", "$\\beta_{\\rm long}$ (mag dex$^{-1}$)"},
    {"gamma", "metallicity term gamma (mag/dex)", "$\\gamma$ (mag dex$^{-1}$)"},
    {"parallax_offset_mas", "parallax offset (mas)", "$\\Delta\\varpi$ (mas)"},
    {"sigma_int", "intrinsic scatter (mag)", "$\\sigma_{\\rm int}$ (mag)"},
};

// The quantity's label, or the parameter's own name when it has none.
std::string quantity_label(const std::string& parameter, bool latex) {
  for (const auto& q : kQuantities)
    if (parameter == q.parameter) return latex ? q.latex : q.label;
  return latex ? escape_latex(parameter) : parameter;
}

std::string quote_csv(const std::string& s) {
  if (s.find_first_of(",\"") == std::string::npos) return s;
  std::string out = "\"";
  for (char c : s) out += c == '"' ? std::string("\"\"") : std::string(1, c);
  return out + "\"";
}

double nan_when_null(const std::optional<double>& v) { return v ? *v : NAN; }

// One cell per format: "v +- e" (plain), "$v \pm e$" (LaTeX), "(fixed)" for fixed ones;
// with both errors, the bootstrap's follows in parentheses, rounded like the first.
std::string cell(const FitParameterRecord& p, TableFormat f, TableErrors errors) {
  const double v = p.value;
  const bool fixed = p.fixed();
  const double cov = nan_when_null(p.error), boot = nan_when_null(p.bootstrap_error);
  const double e = fixed ? NAN : errors == TableErrors::kBootstrap ? boot : cov;
  Rounded r = round_for_print(v, e);
  if (fixed) r.value = fmt::format("{}", v);  // a fixed value prints as it was given
  std::string second;
  if (errors == TableErrors::kBoth && !fixed && std::isfinite(boot) && !r.error.empty())
    second = fmt::format(" ({:.{}f})", boot, std::max(r.decimals, 0));
  if (f == TableFormat::kLatex) {
    if (fixed) return fmt::format("${}$ (fixed)", r.value);
    return r.error.empty() ? fmt::format("${}$", r.value)
                           : fmt::format("${} \\pm {}${}", r.value, r.error, second);
  }
  if (fixed) return r.value + " (fixed)";
  return r.error.empty() ? r.value : fmt::format("{} +- {}{}", r.value, r.error, second);
}

struct Grid {
  std::vector<std::string> header;
  std::vector<std::vector<std::string>> rows;
};

std::string render(const Grid& g, TableFormat f, const std::string& caption,
                   const std::string& label) {
  std::string out;
  if (f == TableFormat::kCsv) {
    for (std::size_t i = 0; i < g.header.size(); ++i)
      out += (i ? "," : "") + quote_csv(g.header[i]);
    out += "\n";
    for (const auto& row : g.rows) {
      for (std::size_t i = 0; i < row.size(); ++i) out += (i ? "," : "") + quote_csv(row[i]);
      out += "\n";
    }
    return out;
  }
  if (f == TableFormat::kMarkdown) {
    out += "|";
    for (const auto& h : g.header) out += " " + h + " |";
    out += "\n|";
    for (std::size_t i = 0; i < g.header.size(); ++i) out += i == 0 ? "---|" : "---:|";
    out += "\n";
    for (const auto& row : g.rows) {
      out += "|";
      for (const auto& c : row) out += " " + c + " |";
      out += "\n";
    }
    return out;
  }
  out +=
      fmt::format("\\begin{{deluxetable}}{{l{}}}\n\\tablecaption{{{}\\label{{{}}}}}\n\\tablehead{{",
                  std::string(g.header.size() - 1, 'c'), caption, label);
  for (std::size_t i = 0; i < g.header.size(); ++i)
    out += (i ? " & " : "") + fmt::format("\\colhead{{{}}}", g.header[i]);
  out += "}\n\\startdata\n";
  for (std::size_t r = 0; r < g.rows.size(); ++r) {
    for (std::size_t i = 0; i < g.rows[r].size(); ++i) out += (i ? " & " : "") + g.rows[r][i];
    out += r + 1 < g.rows.size() ? " \\\\\n" : "\n";
  }
  out += "\\enddata\n\\end{deluxetable}\n";
  return out;
}

// The caption of a relation table: the relation's equation, every relation's pivot, and
// which errors the table shows.
std::string relation_caption(const std::vector<Calibration>& versions,
                             const std::vector<std::string>& relations, TableErrors errors,
                             bool latex) {
  std::string names, pivots;
  for (const auto& c : versions)
    names += (names.empty() ? "" : ", ") + (latex ? escape_latex(c.label()) : c.label());
  for (const auto& rel : relations) {
    double pivot = NAN;
    for (const auto& c : versions)
      if (const auto r = c.find_relation_record(rel)) pivot = r->pivot_log_period;
    pivots +=
        fmt::format("{}{} {}", pivots.empty() ? "" : ", ", latex ? escape_latex(rel) : rel, pivot);
  }
  const char* equation =
      latex
          ? "$M = \\alpha + \\beta\\,(\\log P - \\log P_0) + \\gamma\\,{\\rm [Fe/H]}$, with slope "
            "$\\beta_{\\rm long}$ above a break where fitted"
          : "M = alpha + beta (log P - log P0) + gamma [Fe/H], with slope beta_long above a break "
            "where fitted";
  const char* shown =
      errors == TableErrors::kCovariance
          ? "Errors from the covariance at the optimum (inverse Hessian)."
      : errors == TableErrors::kBootstrap
          ? "Errors from the bootstrap (half the 16th-84th percentile range)."
          : "Errors from the covariance at the optimum; in parentheses, from the bootstrap.";
  return fmt::format("Period-luminosity relations ({}): {}; pivot {} {}. {}", names, equation,
                     latex ? "$\\log P_0$:" : "log P0:", pivots, shown);
}

}  // namespace

std::string escape_latex(const std::string& s) {
  std::string out;
  for (char c : s) {
    switch (c) {
      case '\\':
        out += "\\textbackslash{}";
        break;
      case '~':
        out += "\\textasciitilde{}";
        break;
      case '^':
        out += "\\textasciicircum{}";
        break;
      case '_':
      case '&':
      case '%':
      case '#':
      case '$':
      case '{':
      case '}':
        out += '\\';
        out += c;
        break;
      default:
        out += c;
    }
  }
  return out;
}

Rounded round_for_print(double value, double error) {
  Rounded r;
  if (!std::isfinite(error) || error <= 0) {
    r.decimals = 4;
    r.value = fmt::format("{:.4f}", value);
    return r;
  }
  // Two significant digits of the error: its leading digit's place, one further.
  int lead = static_cast<int>(std::floor(std::log10(error)));
  int decimals = 1 - lead;
  // Rounding can carry into a new digit (0.0996 -> 0.10): recompute from the rounded error.
  double scale = std::pow(10.0, decimals);
  double e = std::round(error * scale) / scale;
  if (static_cast<int>(std::floor(std::log10(e))) != lead) decimals -= 1;
  r.decimals = decimals;
  if (decimals >= 0) {
    r.value = fmt::format("{:.{}f}", value, decimals);
    r.error = fmt::format("{:.{}f}", error, decimals);
  } else {
    double s = std::pow(10.0, -decimals);
    r.value = fmt::format("{:.0f}", std::round(value / s) * s);
    r.error = fmt::format("{:.0f}", std::round(error / s) * s);
  }
  if (r.value == "-0" || r.value.rfind("-0.", 0) == 0) {
    bool all_zero = r.value.find_first_not_of("-0.") == std::string::npos;
    if (all_zero) r.value = r.value.substr(1);
  }
  return r;
}

std::string relation_table(const std::vector<Calibration>& versions, TableFormat f,
                           TableErrors errors) {
  Grid g;
  g.header.push_back(f == TableFormat::kLatex ? "Relation / quantity" : "relation / quantity");
  for (const auto& c : versions)
    g.header.push_back(f == TableFormat::kLatex ? escape_latex(c.label()) : c.label());
  std::vector<std::string> relations;
  for (const auto& c : versions)
    for (const auto& n : c.relation_names())
      if (std::find(relations.begin(), relations.end(), n) == relations.end())
        relations.push_back(n);
  for (const auto& rel : relations) {
    const std::string rel_name = f == TableFormat::kLatex ? escape_latex(rel) : rel;
    for (const auto& q : kQuantities) {
      std::vector<std::string> row = {
          fmt::format("{}: {}", rel_name, f == TableFormat::kLatex ? q.latex : q.label)};
      bool any = false;
      for (const auto& c : versions) {
        const auto r = c.find_relation_record(rel);
        std::string text = f == TableFormat::kLatex ? "\\nodata" : "";
        if (r)
          for (const FitParameterRecord& p : r->parameters)
            if (p.name == q.parameter) text = cell(p, f, errors), any = true;
        row.push_back(text);
      }
      if (any) g.rows.push_back(row);
    }
    std::vector<std::string> row = {fmt::format("{}: N", rel_name)};
    for (const auto& c : versions) {
      const auto r = c.find_relation_record(rel);
      row.push_back(r ? std::to_string(r->n_used.value())
                      : (f == TableFormat::kLatex ? "\\nodata" : ""));
    }
    g.rows.push_back(row);
  }
  return render(g, f, relation_caption(versions, relations, errors, f == TableFormat::kLatex),
                "tab:pl");
}

// True when the residuals carry the hierarchical fit's membership probabilities.
bool has_membership(const StarTable& t, const std::string& relation) {
  if (!t.has(residual_col::kMembership)) return false;
  for (std::size_t i = 0; i < t.rows(); ++i)
    if (t.column(residual_col::kRelation).text[i] == relation &&
        !t.column(residual_col::kMembership).is_null(i) &&
        std::isfinite(t.column(residual_col::kMembership).real[i]))
      return true;
  return false;
}

std::string star_table(const StarTable& t, const std::string& relation, TableFormat f) {
  Grid g;
  const bool membership = has_membership(t, relation);
  g.header = {
      "id",   "log P", "m0 (mag)", "parallax (mas)", "parallax error (mas)", "residual (sigma)",
      "used", "note"};
  if (f == TableFormat::kLatex)
    g.header = {
        "ID",          "$\\log P$", "$m_0$ (mag)", "$\\varpi$ (mas)", "$\\sigma_\\varpi$ (mas)",
        "$r/\\sigma$", "Used",      "Note"};
  if (membership)
    g.header.insert(g.header.end() - 2,
                    f == TableFormat::kLatex ? "$p_{\\rm member}$" : "membership");
  auto num = [&](const std::string& col, std::size_t i, int decimals) {
    if (!t.has(col) || t.column(col).is_null(i) || !std::isfinite(t.column(col).real[i]))
      return std::string(f == TableFormat::kLatex ? "\\nodata" : "");
    return fmt::format("{:.{}f}", t.column(col).real[i], decimals);
  };
  for (std::size_t i = 0; i < t.rows(); ++i) {
    if (t.column(residual_col::kRelation).text[i] != relation) continue;
    const bool used = t.column(residual_col::kUsed).boolean[i] != 0;
    std::string id = t.column(residual_col::kId).text[i],
                reason = t.column(residual_col::kReason).is_null(i)
                             ? ""
                             : t.column(residual_col::kReason).text[i];
    if (likely_outlier(t, i)) reason = "likely outlier or blend";
    if (f == TableFormat::kLatex) id = escape_latex(id), reason = escape_latex(reason);
    std::vector<std::string> row{id,
                                 num(residual_col::kLogPeriodF, i, 4),
                                 num(residual_col::kM0, i, 3),
                                 num(residual_col::kParallaxCorrectedMas, i, 4),
                                 num(residual_col::kParallaxErrMas, i, 4),
                                 num(residual_col::kResidual, i, 2)};
    if (membership) row.push_back(num(residual_col::kMembership, i, 2));
    row.push_back(used ? "yes" : "no");
    row.push_back(reason);
    g.rows.push_back(row);
  }
  std::string caption = "Calibrators of the " + escape_latex(relation) + " relation.";
  if (membership)
    caption += f == TableFormat::kLatex
                   ? " $p_{\\rm member}$: probability of being a member of the relation, not an "
                     "outlier or a blend, "
                     "in the hierarchical fit; below 0.5 the star is noted as a likely outlier."
                   : " membership: probability of being a member of the relation, not an outlier "
                     "or a blend, in the "
                     "hierarchical fit; below 0.5 the star is noted as a likely outlier.";
  return render(g, f, caption, "tab:stars");
}

std::string error_budget_table(const nlohmann::json& budget, TableFormat f) {
  // Columns: the baseline, then each category's quadrature sum of shifts, then the total.
  std::vector<std::string> categories;
  for (const auto& rel : budget.at(budget_key::kRelations))
    for (const auto& p : rel.at(budget_key::kParameters))
      for (const auto& [cat, q] : p.at(budget_key::kCategories).items())
        if (std::find(categories.begin(), categories.end(), cat) == categories.end())
          categories.push_back(cat);
  Grid g;
  const bool latex = f == TableFormat::kLatex;
  g.header.push_back(latex ? "Relation / parameter" : "relation / parameter");
  g.header.push_back(latex ? "Baseline" : "baseline");
  for (const auto& c : categories) g.header.push_back(latex ? escape_latex(c) : c);
  g.header.push_back(latex ? "Total systematic" : "total systematic");
  for (const auto& rel : budget.at(budget_key::kRelations)) {
    const std::string rel_name = rel.at(budget_key::kName).get<std::string>();
    for (const auto& p : rel.at(budget_key::kParameters)) {
      const double value = p.at(budget_key::kBaseline).get<double>();
      const double error = p.at(budget_key::kBaselineError).is_null()
                               ? NAN
                               : p.at(budget_key::kBaselineError).get<double>();
      const Rounded r = round_for_print(value, error);
      const std::string name = p.at(budget_key::kName).get<std::string>();
      std::vector<std::string> row = {fmt::format(
          "{}: {}", latex ? escape_latex(rel_name) : rel_name, quantity_label(name, latex))};
      row.push_back(r.error.empty() ? r.value
                                    : (latex ? fmt::format("${} \\pm {}$", r.value, r.error)
                                             : fmt::format("{} +- {}", r.value, r.error)));
      // Shifts one decimal finer than the baseline's error, with their size in its sigmas.
      auto shift_cell = [&](double q) {
        std::string text = fmt::format("{:.{}f}", q, r.decimals + 1);
        if (std::isfinite(error) && error > 0)
          text += latex ? fmt::format(" ({:.2f}$\\sigma$)", q / error)
                        : fmt::format(" ({:.2f} sigma)", q / error);
        return text;
      };
      for (const auto& c : categories)
        row.push_back(p.at(budget_key::kCategories).contains(c)
                          ? shift_cell(p.at(budget_key::kCategories).at(c).get<double>())
                          : (latex ? "\\nodata" : ""));
      row.push_back(shift_cell(p.at(budget_key::kTotal).get<double>()));
      g.rows.push_back(row);
    }
  }
  return render(
      g, f,
      "Systematic error budget: for each category of analysis choices, the quadrature sum of the "
      "shifts of its "
      "variants from the baseline; in parentheses in units of the baseline's statistical error.",
      "tab:budget");
}

}  // namespace rungcal
