// SPDX-License-Identifier: MIT
#include "rungcal/report/site.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <map>
#include <optional>
#include <set>

#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include "rungcal/calibration/diff.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/file_names.hpp"
#include "rungcal/core/version.hpp"
#include "rungcal/report/figures.hpp"
#include "rungcal/report/html.hpp"
#include "rungcal/report/likely_outlier.hpp"
#include "rungcal/report/run_history.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

// The page's style: system fonts, and markers that do not rely on colour alone (withdrawn
// rows are struck through and labelled, alarms labelled in words).
constexpr const char* kStyle =
    R"(body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 72em; padding: 0 1em; color: #1a1a1a; }
h1 { margin-bottom: 0.2em; }
table { border-collapse: collapse; margin: 0.8em 0 1.6em; font-variant-numeric: tabular-nums; }
caption { text-align: left; font-weight: 600; padding-bottom: 0.3em; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.6em; text-align: left; vertical-align: top; }
th { background: #eee; }
tr.alarm td { background: #fde2d4; font-weight: 600; }
tr.withdrawn td { color: #666; text-decoration: line-through; }
tr.failed td { background: #fde2d4; }
.charts { display: flex; flex-wrap: wrap; gap: 1em; }
svg.history { border: 1px solid #ddd; background: #fff; }
svg.history .frame { fill: none; stroke: #999; }
svg.history .bar { stroke: #0072b2; stroke-width: 1.5; }
svg.history .version-point { fill: #0072b2; }
svg.history .withdrawn { fill: #fff; stroke: #0072b2; stroke-width: 1.5; }
svg.history .alarm { fill: #d55e00; }
svg.history text { font-size: 11px; font-family: system-ui, sans-serif; }
figure { display: inline-block; margin: 0 1em 1em 0; }
figure img { max-width: 34em; border: 1px solid #ddd; }
.note { color: #555; }
)";

std::string fmt_value(double v, double e) {
  if (!std::isfinite(e)) return fmt::format("{:.5g}", v);
  return fmt::format("{:.5g} ± {:.2g}", v, e);
}

struct Versions {
  std::vector<Calibration> shown;  // oldest first, the latest's last
  std::set<int> withdrawn;
  Calibration latest;
};

Versions load_versions(const SiteOptions& o) {
  Versions v;
  v.latest = load_calibration(o.store, o.calibration + "@latest");
  for (const auto& w : withdrawn_versions(o.store, o.calibration)) v.withdrawn.insert(w.version);
  std::vector<int> numbers = calibration_versions(o.store, o.calibration);
  if (numbers.size() > o.max_versions)
    numbers.erase(numbers.begin(), numbers.end() - static_cast<std::ptrdiff_t>(o.max_versions));
  for (int n : numbers)
    v.shown.push_back(load_calibration(o.store, fmt::format("{}@{}", o.calibration, n)));
  return v;
}

// The largest |shift| in sigma of any parameter of each relation between two versions,
// diffed once per pair of versions, not once per relation.
class ShiftsBetweenVersions {
 public:
  double largest(const Calibration& from, const Calibration& to, const std::string& relation) {
    auto [it, fresh] = by_pair_.try_emplace({from.version(), to.version()});
    if (fresh)
      for (const ParameterShift& s : diff_calibrations(from, to).shifts)
        if (std::isfinite(s.shift_in_sigma))
          it->second[s.relation] = std::max(it->second[s.relation], std::abs(s.shift_in_sigma));
    const auto r = it->second.find(relation);
    return r == it->second.end() ? 0.0 : r->second;
  }

 private:
  std::map<std::pair<int, int>, std::map<std::string, double>> by_pair_;
};

std::string header_section(const Versions& v) {
  const nlohmann::json& doc = v.latest.document;
  std::string out = fmt::format(
      "<header>\n<h1>{}</h1>\n<p>Latest version: <strong>{}</strong>, published {}.</p>\n",
      html_escape(v.latest.name()), v.latest.version(),
      html_escape(doc.value(calibration_key::kPublishedUtc, "")));
  const Provenance prov =
      provenance_from_json(v.latest.fit().value(fit_key::kProvenance, nlohmann::json::object()));
  HtmlTable inputs{"Inputs that made it", {"input", "rows", "SHA-256"}, {}, {}};
  for (const InputRecord& in : prov.inputs)
    inputs.rows.push_back({in.path, std::to_string(in.rows), in.sha256.substr(0, 16)});
  if (!inputs.rows.empty()) out += html_table(inputs);
  out += fmt::format(
      "<p class=\"note\">Made by rungcal {} (commit {}); fit config SHA-256 {}.</p>\n</header>\n",
      html_escape(prov.software_version), html_escape(prov.software_commit),
      html_escape(prov.config_sha256.substr(0, 16)));
  return out;
}

// The relation's own parameters, when fitted: fixed ones do not move, and the distance
// prior's and [Fe/H] population's hyperparameters are nuisance parameters (all of them are
// in the calibration file and the diff).
bool shown_in_history(const FitParameterRecord& parameter) {
  const std::string& name = parameter.name;
  if (parameter.fixed()) return false;
  return name.rfind("distance_", 0) != 0 && name != "feh_mean" && name != "feh_spread";
}

// Per relation: a table of every shown version's parameters, and one chart per parameter.
std::string history_section(const SiteOptions& o, const Versions& v) {
  std::string out = "<section id=\"history\">\n<h2>Parameters across versions</h2>\n";
  out += fmt::format(
      "<p class=\"note\">The relations' fitted parameters (the fixed ones and the "
      "hyperparameters of the distance prior and the [Fe/H] population are in the calibration "
      "file). Errors from the covariance. A drift alarm marks a version that moved a "
      "parameter by more than {} sigma from the version before it; withdrawn versions (above "
      "the one <code>latest</code> names) are struck through.</p>\n",
      o.drift_alarm_sigma);
  ShiftsBetweenVersions shifts;
  for (const std::string& relation : v.latest.relation_names()) {
    std::vector<std::string> names;
    for (const FitParameterRecord& p : v.latest.relation_record(relation).parameters)
      if (shown_in_history(p)) names.push_back(p.name);
    HtmlTable t{relation + ": parameters by version", {"version", "published", "status"}, {}, {}};
    for (const auto& n : names) t.header.push_back(n);
    std::vector<std::vector<HistoryPoint>> charts(names.size());
    const Calibration* before = nullptr;
    for (const Calibration& c : v.shown) {
      const std::optional<FitRelationRecord> rel = c.find_relation_record(relation);
      if (!rel) continue;
      const bool withdrawn = v.withdrawn.count(c.version()) > 0;
      const double moved = before ? shifts.largest(*before, c, relation) : 0.0;
      const bool alarm = moved > o.drift_alarm_sigma;
      std::string status = withdrawn                           ? "withdrawn"
                           : c.version() == v.latest.version() ? "latest"
                                                               : "";
      if (alarm)
        status += fmt::format("{}drift alarm: {:.1f} sigma", status.empty() ? "" : "; ", moved);
      std::vector<std::string> row = {fmt::format("v{}", c.version()),
                                      c.document.value(calibration_key::kPublishedUtc, ""), status};
      for (std::size_t k = 0; k < names.size(); ++k) {
        const FitParameterRecord* p = rel->find_parameter(names[k]);
        if (!p) {
          row.push_back("");
          continue;
        }
        const double value = p->value, error = p->error_or_nan();
        row.push_back(fmt_value(value, error));
        charts[k].push_back({c.version(), value, error, withdrawn, alarm});
      }
      t.rows.push_back(row);
      t.row_classes.push_back(alarm ? "alarm" : withdrawn ? "withdrawn" : "");
      if (!withdrawn) before = &c;
    }
    out += fmt::format("<h3>{}</h3>\n", html_escape(relation)) + html_table(t) +
           "<div class=\"charts\">\n";
    for (std::size_t k = 0; k < names.size(); ++k)
      out += history_chart_svg(relation + " " + names[k], charts[k]);
    out += "</div>\n";
  }
  return out + "</section>\n";
}

std::string residuals_path(const SiteOptions& o, const Calibration& c) {
  return (fs::path(o.store) / o.calibration / fmt::format("v{:04d}", c.version()) /
          "fit_residuals.fits")
      .string();
}

std::string figures_section(const SiteOptions& o, const Versions& v, const StarTable* residuals,
                            SiteOutcome& outcome) {
  std::string out = "<section id=\"figures\">\n<h2>Figures of the latest version</h2>\n";
  if (!residuals)
    return out + "<p>The latest version keeps no residuals: no figures.</p>\n</section>\n";
  for (const std::string& relation : v.latest.relation_names()) {
    const std::string pl = "pl_" + file_name_part(relation) + ".svg";
    const std::string res = "residuals_" + file_name_part(relation) + ".svg";
    pl_diagram(v.latest, relation, *residuals, FigureFormat::kSvg, o.out_dir + "/" + pl);
    residual_trends(v.latest, relation, *residuals, FigureFormat::kSvg, o.out_dir + "/" + res);
    outcome.figures += 2;
    out += fmt::format(
        "<figure><img src=\"{0}\" alt=\"Period-luminosity diagram of {1} in {2}: calibrators' "
        "absolute "
        "magnitudes against log period, with the fitted relation\"><figcaption>{1}: "
        "period-luminosity "
        "diagram</figcaption></figure>\n",
        html_escape(pl), html_escape(relation), html_escape(v.latest.label()));
    out += fmt::format(
        "<figure><img src=\"{0}\" alt=\"Normalised residuals of {1} against [Fe/H], G and parallax "
        "signal-to-noise\"><figcaption>{1}: residual trends</figcaption></figure>\n",
        html_escape(res), html_escape(relation));
  }
  return out + "</section>\n";
}

std::string changes_section(const Versions& v) {
  std::string out = "<section id=\"changes\">\n<h2>What the latest version changed</h2>\n";
  const Calibration* before = nullptr;
  for (const Calibration& c : v.shown)
    if (c.version() < v.latest.version() && !v.withdrawn.count(c.version())) before = &c;
  if (!before) return out + "<p>The first version: nothing to compare with.</p>\n</section>\n";
  const CalibrationDiff d = diff_calibrations(*before, v.latest);
  HtmlTable shifts{fmt::format("From {} to {}", d.from_label, d.to_label),
                   {"relation", "parameter", "from", "to", "shift", "shift / sigma"},
                   {},
                   {}};
  for (const ParameterShift& s : d.shifts)
    shifts.rows.push_back(
        {s.relation, s.parameter, fmt_value(s.from, s.from_error), fmt_value(s.to, s.to_error),
         fmt::format("{:+.5g}", s.shift),
         std::isfinite(s.shift_in_sigma) ? fmt::format("{:+.2f}", s.shift_in_sigma) : ""});
  out += html_table(shifts);
  HtmlTable inputs{"Inputs", {"change", "input"}, {}, {}};
  for (const InputChange& in : d.inputs) inputs.rows.push_back({in.what, in.path});
  if (d.config_changed) inputs.rows.push_back({"changed", "the fit config"});
  out += inputs.rows.empty() ? "<p>No input changed.</p>\n" : html_table(inputs);
  HtmlTable stars{"Stars that entered or left the fit", {"relation", "change", "stars"}, {}, {}};
  auto add = [&](const auto& list, const char* what) {
    for (const auto& [relation, ids] : list) {
      std::string joined;
      for (const auto& id : ids) joined += (joined.empty() ? "" : ", ") + id;
      if (!ids.empty()) stars.rows.push_back({relation, what, joined});
    }
  };
  add(d.entered, "entered");
  add(d.left, "left");
  out += stars.rows.empty() ? "<p>The same stars were used.</p>\n" : html_table(stars);
  return out + "</section>\n";
}

// Stars the fit refused (with its reason), stars it kept but finds likely outliers
// (membership below one half), and rows the run's ingest refused.
std::string stars_section(const SiteOptions& o, const Versions& v, const StarTable* residuals) {
  std::string out = "<section id=\"stars\">\n<h2>Stars refused or flagged</h2>\n";
  HtmlTable fit{"Refused by the fit or likely outliers (latest version)",
                {"relation", "star", "why"},
                {},
                {}};
  for (const std::string& relation : v.latest.relation_names())
    for (const RefusedStarRecord& r : v.latest.relation_record(relation).rejected)
      fit.rows.push_back({relation, r.id, r.reason});
  if (residuals)
    for (std::size_t i = 0; i < residuals->rows(); ++i)
      if (likely_outlier(*residuals, i))
        fit.rows.push_back({residuals->column("relation").text[i], residuals->column("id").text[i],
                            fmt::format("likely outlier: membership {:.2f}",
                                        residuals->column("membership").real[i])});
  out += fit.rows.empty() ? "<p>The fit refused no star and flags none.</p>\n" : html_table(fit);
  const std::string catalog = o.run_folder.empty() ? "" : o.run_folder + "/catalog.fits";
  if (!catalog.empty() && fs::exists(catalog)) {
    const StarTable rejects = read_fits_table(catalog, {catalog_hdu::kRejects, 0}).table;
    HtmlTable t{"Rows refused at ingest (last run that ingested)",
                {"row", "star", "rule", "column", "why"},
                {},
                {}};
    namespace R = reject_col;
    for (std::size_t i = 0; i < rejects.rows(); ++i)
      t.rows.push_back({std::to_string(rejects.column(R::kSourceRow).integer[i]),
                        rejects.column(R::kId).text[i], rejects.column(R::kRule).text[i],
                        rejects.column(R::kColumn).text[i], rejects.column(R::kMessage).text[i]});
    out += t.rows.empty() ? "<p>Ingest refused no row.</p>\n" : html_table(t);
  }
  return out + "</section>\n";
}

std::string runs_section(const SiteOptions& o) {
  if (o.run_folder.empty()) return "";
  std::vector<RunRecord> runs = read_run_history(o.run_folder + "/run_history.json");
  std::reverse(runs.begin(), runs.end());
  if (runs.size() > o.max_runs) runs.resize(o.max_runs);
  HtmlTable t{"Newest first", {"finished (UTC)", "exit code", "summary"}, {}, {}};
  for (const auto& r : runs) {
    t.rows.push_back(
        {r.finished_utc,
         fmt::format("{} ({})", r.exit_code, exit_code_name(static_cast<ExitCode>(r.exit_code))),
         r.summary});
    const bool failed = r.exit_code == 1 || r.exit_code == 2 || r.exit_code == 7;
    t.row_classes.push_back(failed ? "failed" : r.exit_code == 4 ? "alarm" : "");
  }
  return "<section id=\"runs\">\n<h2>Recent runs</h2>\n" +
         (runs.empty() ? std::string("<p>No run recorded yet.</p>\n") : html_table(t)) +
         "</section>\n";
}

std::string link_to(const SiteOptions& o, const fs::path& target) {
  std::error_code ec;
  const fs::path rel = fs::relative(target, fs::absolute(o.out_dir), ec);
  const std::string href = ec || rel.empty() ? target.string() : rel.string();
  return fmt::format("<li><a href=\"{}\">{}</a></li>\n", html_escape(href),
                     html_escape(target.filename().string()));
}

std::string products_section(const SiteOptions& o, const Versions& v) {
  std::string out =
      "<section id=\"products\">\n<h2>Products</h2>\n<h3>The latest version</h3>\n<ul>\n";
  const fs::path version =
      fs::absolute(fs::path(o.store) / o.calibration / fmt::format("v{:04d}", v.latest.version()));
  std::vector<fs::path> files;
  for (const auto& e : fs::directory_iterator(version))
    if (e.is_regular_file()) files.push_back(e.path());
  std::sort(files.begin(), files.end());
  for (const auto& f : files) out += link_to(o, f);
  out += "</ul>\n";
  if (!o.run_folder.empty() && fs::is_directory(o.run_folder)) {
    files.clear();
    for (const auto& e : fs::directory_iterator(fs::absolute(o.run_folder)))
      if (e.is_regular_file() && e.path().filename().string()[0] != '.') files.push_back(e.path());
    std::sort(files.begin(), files.end());
    out += "<h3>The run folder</h3>\n<ul>\n";
    for (const auto& f : files) out += link_to(o, f);
    out += "</ul>\n";
  }
  return out + "</section>\n";
}

}  // namespace

std::string SiteOptions::check() const {
  if (store.empty()) return "store: required";
  if (auto why = check_calibration_name(calibration); !why.empty())
    return "calibration: " + why.substr(6);
  if (out_dir.empty()) return "out: required";
  if (!(drift_alarm_sigma > 0)) return "drift_alarm_sigma: must be positive";
  if (max_versions == 0) return "max_versions: at least 1";
  return "";
}

SiteOutcome write_site(const SiteOptions& o) {
  throw_if_invalid(o.check(), "rungcal-report --site");
  SiteOutcome outcome;
  const Versions v = load_versions(o);
  outcome.versions = static_cast<int>(v.shown.size());
  std::optional<StarTable> residuals;
  if (fs::exists(residuals_path(o, v.latest)))
    residuals = read_fits_table(residuals_path(o, v.latest), {"RESIDUALS", 0}).table;
  const StarTable* res = residuals ? &*residuals : nullptr;
  // Assets first, the page last: the page never names a figure that is not there yet.
  write_file_atomically(o.out_dir + "/site.css", kStyle);
  std::string body = header_section(v) + "<main>\n" + history_section(o, v) +
                     figures_section(o, v, res, outcome) + changes_section(v) +
                     stars_section(o, v, res) + runs_section(o) + products_section(o, v) +
                     "</main>\n";
  const std::string page = fmt::format(
      "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<meta "
      "name=\"viewport\" "
      "content=\"width=device-width, initial-scale=1\">\n<title>{}: calibration "
      "status</title>\n<link "
      "rel=\"stylesheet\" href=\"site.css\">\n</head>\n<body>\n{}<footer><p class=\"note\">Written "
      "by rungcal {} "
      "from the store {}.</p></footer>\n</body>\n</html>\n",
      html_escape(o.calibration), body, html_escape(software_version()), html_escape(o.store));
  write_file_atomically(o.out_dir + "/index.html", page);
  return outcome;
}

}  // namespace rungcal
