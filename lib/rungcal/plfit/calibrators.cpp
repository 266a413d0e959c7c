// SPDX-License-Identifier: MIT
#include "rungcal/plfit/fit_parts.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <filesystem>
#include <map>
#include <numbers>
#include <thread>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/byte_buffer.hpp"
#include "rungcal/core/cluster.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/progress.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal::fit_parts {
namespace {

bool contains(const std::vector<std::string>& v, const std::string& x) {
  return std::find(v.begin(), v.end(), x) != v.end();
}

double value_or_nan(const StarTable& t, const std::string& col, std::size_t r) {
  if (!t.has(col)) return std::numeric_limits<double>::quiet_NaN();
  return t.column(col).as_real(r);
}

std::string text_or_empty(const StarTable& t, const std::string& col, std::size_t r) {
  if (!t.has(col) || t.column(col).is_null(r)) return "";
  return t.column(col).to_string(r);
}

// The star's parallax with the zero point subtracted and its error inflated, into s.plx and
// s.plx_err: "" when usable, else why not.
std::string correct_parallax(const FitOptions& o, const StarTable& cat, std::size_t r,
                             const ParallaxTools& tools, StarOutcome& s) {
  const double plx = value_or_nan(cat, col::kParallax, r),
               plx_err = value_or_nan(cat, col::kParallaxErr, r);
  double z = 0.0;
  if (o.zero_point == ZeroPointRecipe::kConstant) z = o.zero_point_mas;
  if (o.zero_point == ZeroPointRecipe::kLindegren2021) {
    double g = value_or_nan(cat, col::kGaiaG, r), beta = value_or_nan(cat, col::kEclLat, r);
    double n_param = value_or_nan(cat, col::kAstrometricParams, r);
    bool six = n_param == 6;
    double colour = value_or_nan(cat, six ? col::kPseudocolour : col::kNuEff, r);
    if (!std::isfinite(g) || !std::isfinite(beta) || !std::isfinite(colour) ||
        !std::isfinite(n_param))
      return "zero point inputs missing (G, colour, ecliptic latitude, astrometric parameters)";
    z = (six ? *tools.zp6 : *tools.zp5).zero_point_mas(g, colour, beta);
  }
  double inflate = 1.0;
  if (o.inflation == InflationRecipe::kConstant) inflate = o.inflation_factor;
  if (o.inflation == InflationRecipe::kElBadry2021) {
    double g = value_or_nan(cat, col::kGaiaG, r);
    if (!std::isfinite(g)) return "no G magnitude for the El-Badry et al. 2021 inflation";
    inflate = el_badry_inflation(g);
  }
  if (!std::isfinite(plx_err) || !(plx_err > 0)) return "no positive parallax error";
  s.plx = plx - z;
  s.plx_err = plx_err * inflate;
  // The cut comes after the correction so that refused stars keep their parallax for plots.
  if (o.max_ruwe > 0) {
    double ruwe = value_or_nan(cat, col::kRuwe, r);
    if (std::isfinite(ruwe) && ruwe > o.max_ruwe)
      return fmt::format("RUWE {:.2f} > {}", ruwe, o.max_ruwe);
  }
  return "";
}

// Why a star with the corrected parallax s.plx is not a member of cluster k ("" when it may
// be): its parallax contradicts the cluster's.
std::string non_member_reason(const FitOptions& o, const ClusterOptions& k, const StarOutcome& s) {
  if (!k.has_parallax() || !(o.cluster_member_max_sigma > 0)) return "";
  const double z = (s.plx - k.parallax_mas) / std::hypot(s.plx_err, k.parallax_err_mas);
  if (!(std::abs(z) > o.cluster_member_max_sigma)) return "";
  return fmt::format(
      "not a member of cluster {}: its parallax {:.4f} +- {:.4f} mas differs from the cluster's "
      "{:.4f} +- "
      "{:.4f} by {:.1f} sigma (cluster_member_max_sigma = {})",
      k.group, s.plx, s.plx_err, k.parallax_mas, k.parallax_err_mas, std::abs(z),
      o.cluster_member_max_sigma);
}
}  // namespace

Calibrators select_calibrators(const FitOptions& o, const RelationOptions& rel,
                               const StarTable& cat, const ParallaxTools& tools,
                               const ParamSpec& offset) {
  Calibrators c;
  const std::string mag_col =
      rel.magnitude_column.empty() ? dereddened_magnitude_column(rel.band) : rel.magnitude_column;
  std::string err_col = rel.error_column;
  if (err_col.empty()) {
    err_col = rel.magnitude_column.empty() ? dereddened_magnitude_error_column(rel.band)
                                           : rel.magnitude_column;
    if (!rel.magnitude_column.empty()) {
      auto p = err_col.find("mag_");
      err_col = p == 0 ? "mag_err_" + err_col.substr(4) : err_col + "_err";
    }
  }
  if (!cat.has(mag_col))
    throw InputError(
        {o.input_path, {}, mag_col}, "missing_column",
        fmt::format(
            "relation {} needs this column (dereddened magnitudes come from rungcal-deredden)",
            rel.name));
  if (!cat.has(err_col))
    throw InputError({o.input_path, {}, err_col}, "missing_column",
                     fmt::format("relation {} needs this error column", rel.name));
  if (!cat.has(col::kLogPeriod) || !cat.has(col::kId))
    throw InputError({o.input_path, {}, col::kLogPeriod}, "missing_column",
                     "not a rungcal catalog (no id / log_period)");
  auto grow = [](Eigen::ArrayXd& a, double v) {
    a.conservativeResize(a.size() + 1);
    a[a.size() - 1] = v;
  };
  double var_feh = 0.0;  // the current row's [Fe/H] error squared, kept when the term is on
  auto push = [&grow, &var_feh, &rel](FitData::Common& common, double x, double xl, double feh,
                                      double m0, double var, std::size_t row) {
    grow(common.x, x), grow(common.xl, xl), grow(common.feh, feh), grow(common.m0, m0),
        grow(common.var_m, var);
    if (rel.metallicity) grow(common.var_feh, var_feh);
    common.row.push_back(row);
  };

  for (std::size_t r = 0; r < cat.rows(); ++r) {
    StarOutcome s;
    s.row = r;
    s.id = cat.column(col::kId).to_string(r);
    s.group = text_or_empty(cat, col::kGroup, r);
    auto refuse = [&](const std::string& why) {
      s.reason = why;
      c.stars.push_back(s);
    };
    std::string klass = text_or_empty(cat, col::kClass, r),
                mode = text_or_empty(cat, col::kMode, r);
    if (!rel.classes.empty() && !contains(rel.classes, klass)) {
      refuse("class " + klass + " not in this relation");
      continue;
    }
    if (!rel.modes.empty() && !contains(rel.modes, mode)) {
      refuse("mode " + mode + " not in this relation");
      continue;
    }
    double logp = cat.column(col::kLogPeriod).as_real(r);
    if (rel.fundamentalize) logp = fundamentalized_log_period(klass, mode, logp);
    s.log_period = logp;
    if (logp < rel.min_log_period || logp > rel.max_log_period) {
      refuse(fmt::format("log P = {:.3f} outside [{}, {}]", logp, rel.min_log_period,
                         rel.max_log_period));
      continue;
    }
    double m0 = cat.column(mag_col).as_real(r), e = cat.column(err_col).as_real(r);
    if (!std::isfinite(m0)) {
      refuse("no " + mag_col);
      continue;
    }
    if (!std::isfinite(e) || !(e > 0)) {
      refuse("no positive " + err_col);
      continue;
    }
    s.m0 = m0;
    s.m0_err = e;
    double feh = 0.0;
    if (rel.metallicity) {
      feh = value_or_nan(cat, col::kFeh, r);
      if (!std::isfinite(feh)) {
        refuse("no [Fe/H] for the metallicity term");
        continue;
      }
      const double feh_err = value_or_nan(cat, col::kFehErr, r);
      var_feh = std::isfinite(feh_err) && feh_err > 0 ? feh_err * feh_err : 0.0;
    }
    double x = logp - rel.pivot_log_period;
    double xl = rel.break_log_period ? std::max(0.0, logp - *rel.break_log_period) : 0.0;
    const std::string& group = s.group;
    auto anchor = std::find_if(o.anchors.begin(), o.anchors.end(),
                               [&](const auto& a) { return a.group == group; });
    double mu = value_or_nan(cat, col::kMu, r), mu_err = value_or_nan(cat, col::kMuErr, r);
    const double plx = value_or_nan(cat, col::kParallax, r);
    auto push_group_star = [&](int g, double own_plx, double own_var) {
      s.used = true;
      c.a_star.push_back(c.stars.size());
      push(c.data.anchor, x, xl, feh, m0, e * e, r);
      c.data.group.push_back(g);
      grow(c.data.anchor_plx, own_plx);
      grow(c.data.anchor_var_plx, own_var);
      c.stars.push_back(s);
    };
    if (anchor != o.anchors.end()) {
      s.kind = CalibratorKind::kAnchor;
      push_group_star(static_cast<int>(anchor - o.anchors.begin()), 0.0, 0.0);
      continue;
    }
    auto cluster = std::find_if(o.clusters.begin(), o.clusters.end(),
                                [&](const auto& k) { return k.group == group; });
    if (cluster != o.clusters.end()) {
      s.kind = CalibratorKind::kCluster;
      double own = 0.0, own_var = 0.0;
      if (std::isfinite(plx)) {
        std::string why = correct_parallax(o, cat, r, tools, s);
        if (why.empty()) {
          if (std::string no = non_member_reason(o, *cluster, s); !no.empty()) {
            refuse(no);
            continue;
          }
          if (o.space == FitSpace::kHierarchical)
            own = s.plx, own_var = s.plx_err * s.plx_err;
          else
            why = "only the hierarchical space uses members' parallaxes";
        }
        if (!why.empty()) s.reason = "used without its own parallax: " + why;
      }
      s.member_parallax = own_var > 0;
      push_group_star(static_cast<int>(o.anchors.size() + (cluster - o.clusters.begin())), own,
                      own_var);
      continue;
    }
    if (o.use_known_mu && std::isfinite(mu)) {
      s.kind = CalibratorKind::kKnownDistance;
      s.used = true;
      c.k_star.push_back(c.stars.size());
      push(c.data.known, x, xl, feh, m0, e * e, r);
      grow(c.data.mu, mu);
      grow(c.data.var_mu, std::isfinite(mu_err) ? mu_err * mu_err : 0.0);
      c.stars.push_back(s);
      continue;
    }
    if (!std::isfinite(plx)) {
      refuse("no distance: neither a parallax nor a known distance modulus");
      continue;
    }
    s.kind = CalibratorKind::kParallax;
    if (std::string why = correct_parallax(o, cat, r, tools, s); !why.empty()) {
      refuse(why);
      continue;
    }
    if (o.space == FitSpace::kMagnitude && s.plx - offset.value <= 0) {
      refuse(
          fmt::format("parallax {:.4f} mas is not positive: it cannot enter a magnitude-space fit "
                      "(use space = \"parallax\")",
                      s.plx));
      continue;
    }
    s.used = true;
    c.p_star.push_back(c.stars.size());
    push(c.data.parallax, x, xl, feh, m0, e * e, r);
    grow(c.data.plx, s.plx);
    grow(c.data.var_plx, s.plx_err * s.plx_err);
    c.stars.push_back(s);
  }
  c.data.group_plx = cluster_parallaxes(o);
  return c;
}

std::vector<FitData::GroupParallax> cluster_parallaxes(const FitOptions& o) {
  const bool any = std::any_of(o.clusters.begin(), o.clusters.end(),
                               [](const auto& k) { return k.has_parallax(); });
  if (!any || o.space != FitSpace::kHierarchical) return {};
  std::vector<FitData::GroupParallax> groups(o.anchors.size());
  for (const ClusterOptions& k : o.clusters)
    groups.push_back(
        k.has_parallax()
            ? FitData::GroupParallax{k.parallax_mas, k.parallax_err_mas * k.parallax_err_mas, 1.0}
            : FitData::GroupParallax{});
  return groups;
}

namespace {

// Why the catalog's stars were refused, most common first (issue 19: "0 usable
// calibrators" gave no reason). Reasons that differ only in their numbers ("log P = 0.12
// outside ...") count together, shown by their first instance.
std::string refusal_summary(const Calibrators& c) {
  std::map<std::string, std::pair<int, std::string>> groups;
  for (const StarOutcome& s : c.stars) {
    if (s.used || s.reason.empty()) continue;
    std::string key;
    for (char ch : s.reason)
      if (!std::isdigit(static_cast<unsigned char>(ch)) && ch != '.' && ch != '-' && ch != '+')
        key += ch;
    auto& g = groups[key];
    if (g.first++ == 0) g.second = s.reason;
  }
  std::vector<std::pair<int, std::string>> sorted;
  for (const auto& [key, g] : groups) sorted.push_back(g);
  std::sort(sorted.begin(), sorted.end(),
            [](const auto& a, const auto& b) { return a.first > b.first; });
  std::string out;
  for (std::size_t i = 0; i < sorted.size() && i < 3; ++i)
    out += fmt::format(
        "{}{} x '{}'{}", out.empty() ? "" : "; ", sorted[i].first, sorted[i].second,
        sorted[i].first > 1 && sorted[i].second.find_first_of("0123456789") != std::string::npos
            ? " (and the like)"
            : "");
  if (sorted.size() > 3) out += "; ...";
  return out.empty() ? "" : fmt::format(" (of {} catalog stars, refused: {})", c.stars.size(), out);
}

}  // namespace

void check_constrained(const FitOptions& o, const RelationOptions& rel, const Calibrators& c,
                       const FitSettings& s, const ParameterLayout& L) {
  if (c.data.stars() < 3)
    throw InputError({o.input_path, {}, {}}, "too_few_calibrators",
                     fmt::format("relation {}: {} usable calibrators, at least 3 are needed{}",
                                 rel.name, c.data.stars(), refusal_summary(c)));
  if (s.params[L.offset].mode == ParamMode::kFree && !has_any_parallax(c.data))
    throw InputError(
        {o.config_file, {}, "fit.offset", "line", "key"}, "config_value",
        fmt::format("relation {}: the parallax offset is free but no parallax calibrator is used",
                    rel.name));
  const std::vector<std::string> groups = o.group_names();
  for (std::size_t g = 0; g < groups.size(); ++g)
    if (std::count(c.data.group.begin(), c.data.group.end(), static_cast<int>(g)) == 0)
      spdlog::warn("relation {}: {} {} has no star; its distance modulus is fitted to its {} alone",
                   rel.name,
                   kCalibratorKindNames.name(g < o.anchors.size() ? CalibratorKind::kAnchor
                                                                  : CalibratorKind::kCluster),
                   groups[g], g < o.anchors.size() ? "prior" : "parallax or modulus");
}

}  // namespace rungcal::fit_parts
