// SPDX-License-Identifier: MIT
#include "rungcal/calibration/apply.hpp"

#include <cmath>
#include <filesystem>
#include <map>

#include <fmt/format.h>

#include "rungcal/calibration/store.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

constexpr double kLn10Over5 = 2.302585092994045684 / 5.0;

HostDistance combine(const Calibration& cal, const std::string& relation, const std::string& host,
                     std::vector<TargetDistance*>& stars, const ApplyOptions& o) {
  HostDistance h;
  h.host = host;
  h.n_stars = static_cast<int>(stars.size());
  for (int pass = 0; pass <= o.outlier_iterations; ++pass) {
    double sw = 0, swm = 0;
    for (auto* s : stars)
      if (!s->outlier) sw += 1 / (s->stat_error * s->stat_error), swm += s->mu / (s->stat_error * s->stat_error);
    if (sw == 0) break;
    h.mu = swm / sw;
    h.stat_error = 1 / std::sqrt(sw);
    bool changed = false;
    for (auto* s : stars) {
      bool out = std::abs(s->mu - h.mu) > o.outlier_sigma * s->stat_error;
      if (out && !s->outlier) s->outlier = changed = true;
    }
    if (!changed) break;
  }
  std::vector<double> g;
  double sw = 0, chi2 = 0, spread = 0;
  int used = 0;
  for (auto* s : stars) {
    if (s->outlier) {
      ++h.n_outliers;
      continue;
    }
    double w = 1 / (s->stat_error * s->stat_error);
    if (g.empty()) g.assign(s->gradient.size(), 0.0);
    for (std::size_t j = 0; j < g.size(); ++j) g[j] += w * s->gradient[j];
    sw += w;
    chi2 += w * (s->mu - h.mu) * (s->mu - h.mu);
    spread += (s->mu - h.mu) * (s->mu - h.mu);
    ++used;
  }
  for (double& x : g) x /= sw;
  h.chi2 = chi2;
  h.dispersion = used > 1 ? std::sqrt(spread / (used - 1)) : 0.0;
  h.calibration_error = calibration_error_of(cal, relation, g);
  double total = std::hypot(h.stat_error, h.calibration_error);
  h.distance_mpc = parsec_from_distance_modulus(h.mu) / 1e6;
  h.distance_err_mpc = h.distance_mpc * kLn10Over5 * total;
  return h;
}

StarTable stars_table(const ApplyResult& r) {
  StarTable t;
  for (const char* c : {"id", "host"}) t.add_column(c, ColumnType::kText);
  t.add_column("log_period_f", ColumnType::kReal, "", "log10 of the (fundamentalized) period in days");
  t.add_column("m0", ColumnType::kReal, "mag", "dereddened or Wesenheit magnitude");
  t.add_column("abs_mag", ColumnType::kReal, "mag", "absolute magnitude from the calibration");
  t.add_column("mu", ColumnType::kReal, "mag", "distance modulus");
  t.add_column("mu_stat_err", ColumnType::kReal, "mag", "photometry and intrinsic scatter");
  t.add_column("mu_cal_err", ColumnType::kReal, "mag", "calibration (common to all stars)");
  t.add_column("distance_pc", ColumnType::kReal, "pc");
  t.add_column("distance_mpc", ColumnType::kReal, "Mpc");
  t.add_column("distance_err_mpc", ColumnType::kReal, "Mpc", "both errors in quadrature");
  t.add_column("outlier", ColumnType::kBoolean, "", "left out of the host mean");
  for (const auto& s : r.stars) {
    t.column("id").push_text(s.id);
    t.column("host").push_text(s.host);
    t.column("log_period_f").push_real(s.log_period);
    t.column("m0").push_real(s.m0);
    t.column("abs_mag").push_real(s.abs_mag);
    t.column("mu").push_real(s.mu);
    t.column("mu_stat_err").push_real(s.stat_error);
    t.column("mu_cal_err").push_real(s.calibration_error);
    t.column("distance_pc").push_real(s.distance_pc);
    t.column("distance_mpc").push_real(s.distance_pc / 1e6);
    t.column("distance_err_mpc").push_real(s.distance_err_pc / 1e6);
    t.column("outlier").push_boolean(s.outlier);
  }
  return t;
}

StarTable hosts_table(const ApplyResult& r) {
  StarTable t;
  t.add_column("host", ColumnType::kText);
  t.add_column("n_stars", ColumnType::kInteger);
  t.add_column("n_outliers", ColumnType::kInteger);
  for (const char* c : {"mu", "mu_stat_err", "mu_cal_err", "dispersion"}) t.add_column(c, ColumnType::kReal, "mag");
  t.add_column("chi2", ColumnType::kReal);
  t.add_column("distance_mpc", ColumnType::kReal, "Mpc");
  t.add_column("distance_err_mpc", ColumnType::kReal, "Mpc", "statistical and calibration in quadrature");
  for (const auto& h : r.hosts) {
    t.column("host").push_text(h.host);
    t.column("n_stars").push_integer(h.n_stars);
    t.column("n_outliers").push_integer(h.n_outliers);
    t.column("mu").push_real(h.mu);
    t.column("mu_stat_err").push_real(h.stat_error);
    t.column("mu_cal_err").push_real(h.calibration_error);
    t.column("dispersion").push_real(h.dispersion);
    t.column("chi2").push_real(h.chi2);
    t.column("distance_mpc").push_real(h.distance_mpc);
    t.column("distance_err_mpc").push_real(h.distance_err_mpc);
  }
  return t;
}

}  // namespace

std::string ApplyOptions::check() const {
  if (store.empty()) return "store: required";
  if (calibration.empty()) return "calibration: required (name@latest or name@N)";
  if (relation.empty()) return "relation: required";
  if (targets_path.empty()) return "targets: required";
  if (!(outlier_sigma > 0)) return "outlier_sigma: must be positive";
  return "";
}

ApplyResult apply_calibration(const Calibration& cal, const std::string& relation, const StarTable& t, const ApplyOptions& o) {
  ApplyResult r;
  r.calibration_label = cal.label();
  const std::string mag = "mag0_" + relation, err = "mag0_err_" + relation;
  for (const std::string& c : {std::string(col::kId), std::string(col::kLogPeriod), mag, err})
    if (!t.has(c)) throw InputError({o.targets_path, {}, c}, "missing_column", "the targets need this column");
  std::map<std::string, std::vector<std::size_t>> by_host;
  for (std::size_t i = 0; i < t.rows(); ++i) {
    TargetDistance s;
    s.id = t.column(col::kId).to_string(i);
    s.host = t.has(col::kGroup) && !t.column(col::kGroup).is_null(i) ? t.column(col::kGroup).text[i] : "";
    double logp = t.column(col::kLogPeriod).as_real(i);
    std::string klass = t.has(col::kClass) ? t.column(col::kClass).to_string(i) : "classical_cepheid";
    std::string mode = t.has(col::kMode) ? t.column(col::kMode).to_string(i) : "fundamental";
    s.log_period = fundamentalized_log_period(klass, mode, logp);
    s.m0 = t.column(mag).as_real(i);
    double e = t.column(err).as_real(i);
    if (!std::isfinite(s.m0) || !std::isfinite(e)) continue;  // the target lacks this magnitude
    std::optional<double> feh;
    if (t.has(col::kFeh) && std::isfinite(t.column(col::kFeh).as_real(i))) feh = t.column(col::kFeh).as_real(i);
    Prediction p = predict_absolute_magnitude(cal, relation, s.log_period, feh);
    s.abs_mag = p.abs_mag;
    s.mu = s.m0 - p.abs_mag;
    s.stat_error = std::hypot(e, p.intrinsic_scatter);
    s.calibration_error = p.calibration_error;
    s.gradient = p.gradient;
    s.distance_pc = parsec_from_distance_modulus(s.mu);
    s.distance_err_pc = s.distance_pc * kLn10Over5 * std::hypot(s.stat_error, s.calibration_error);
    by_host[s.host].push_back(r.stars.size());
    r.stars.push_back(s);
  }
  if (r.stars.empty())
    throw InputError({o.targets_path, {}, mag}, "no_rows_left", "no target has this magnitude and its error");
  for (auto& [host, idx] : by_host) {
    std::vector<TargetDistance*> members;
    for (std::size_t i : idx) members.push_back(&r.stars[i]);
    r.hosts.push_back(combine(cal, relation, host, members, o));
  }
  return r;
}

ApplyResult apply_calibration_files(const ApplyOptions& o) {
  throw_if_invalid(o.check(), "");
  Calibration cal = load_calibration(o.store, o.calibration);
  SourceTable targets = read_fits_table(o.targets_path, {"CATALOG", 0});
  ApplyResult r = apply_calibration(cal, o.relation, targets.table, o);
  Provenance prov = Provenance::for_stage("apply");
  prov.inputs.push_back({o.targets_path, sha256_file(o.targets_path), static_cast<std::int64_t>(targets.table.rows())});
  StarTable stars = stars_table(r), hosts = hosts_table(r);
  for (StarTable* t : {&stars, &hosts}) {
    stamp_provenance(*t, prov, "distances");
    t->set_keyword("RGCALIB", r.calibration_label, "calibration name@version");
    t->set_keyword("RGCALSHA", cal.document.value("content_sha256", ""), "calibration content SHA-256");
    t->set_keyword("RGRELAT", o.relation, "relation applied");
  }
  write_fits_tables(o.output_path, {{"STARS", &stars}, {"HOSTS", &hosts}});
  std::string csv = o.csv_path;
  if (csv.empty()) {
    std::filesystem::path p(o.output_path);
    csv = (p.parent_path() / (p.stem().string() + ".csv")).string();
  }
  write_csv_table(stars, csv);
  std::filesystem::path p(csv);
  write_csv_table(hosts, (p.parent_path() / (p.stem().string() + "_hosts.csv")).string());
  return r;
}

}  // namespace rungcal
