// SPDX-License-Identifier: MIT
#include "rungcal/plfit/fit_stage.hpp"

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
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {
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

struct Calibrators {
  FitData data;
  std::vector<StarOutcome> stars;             // every catalog star, in catalog order
  std::vector<std::size_t> p_star, k_star, a_star;  // index into stars per data row
};

struct ParallaxTools {
  std::optional<ZeroPointTable> zp5, zp6;
};

// Chooses one relation's calibrators from the catalog; every refusal keeps its reason.
Calibrators select_calibrators(const FitOptions& o, const RelationOptions& rel, const StarTable& cat,
                               const ParallaxTools& tools, const ParamSpec& offset) {
  Calibrators c;
  const std::string mag_col = rel.magnitude_column.empty() ? "mag0_" + rel.band : rel.magnitude_column;
  std::string err_col = rel.error_column;
  if (err_col.empty()) {
    err_col = rel.magnitude_column.empty() ? "mag0_err_" + rel.band : rel.magnitude_column;
    if (!rel.magnitude_column.empty()) {
      auto p = err_col.find("mag_");
      err_col = p == 0 ? "mag_err_" + err_col.substr(4) : err_col + "_err";
    }
  }
  if (!cat.has(mag_col))
    throw InputError({o.input_path, {}, mag_col}, "missing_column",
                     fmt::format("relation {} needs this column (dereddened magnitudes come from rungcal-deredden)", rel.name));
  if (!cat.has(err_col))
    throw InputError({o.input_path, {}, err_col}, "missing_column", fmt::format("relation {} needs this error column", rel.name));
  if (!cat.has(col::kLogPeriod) || !cat.has(col::kId))
    throw InputError({o.input_path, {}, col::kLogPeriod}, "missing_column", "not a rungcal catalog (no id / log_period)");
  auto grow = [](Eigen::ArrayXd& a, double v) {
    a.conservativeResize(a.size() + 1);
    a[a.size() - 1] = v;
  };
  double var_feh = 0.0;  // the current row's [Fe/H] error squared, kept when the term is on
  auto push = [&grow, &var_feh, &rel](FitData::Common& common, double x, double xl, double feh, double m0, double var,
                                      std::size_t row) {
    grow(common.x, x), grow(common.xl, xl), grow(common.feh, feh), grow(common.m0, m0), grow(common.var_m, var);
    if (rel.metallicity) grow(common.var_feh, var_feh);
    common.row.push_back(row);
  };

  for (std::size_t r = 0; r < cat.rows(); ++r) {
    StarOutcome s;
    s.row = r;
    s.id = cat.column(col::kId).to_string(r);
    auto refuse = [&](const std::string& why) {
      s.reason = why;
      c.stars.push_back(s);
    };
    std::string klass = text_or_empty(cat, col::kClass, r), mode = text_or_empty(cat, col::kMode, r);
    if (!rel.classes.empty() && !contains(rel.classes, klass)) { refuse("class " + klass + " not in this relation"); continue; }
    if (!rel.modes.empty() && !contains(rel.modes, mode)) { refuse("mode " + mode + " not in this relation"); continue; }
    double logp = cat.column(col::kLogPeriod).as_real(r);
    if (rel.fundamentalize) logp = fundamentalized_log_period(klass, mode, logp);
    s.log_period = logp;
    if (logp < rel.min_log_period || logp > rel.max_log_period) {
      refuse(fmt::format("log P = {:.3f} outside [{}, {}]", logp, rel.min_log_period, rel.max_log_period));
      continue;
    }
    double m0 = cat.column(mag_col).as_real(r), e = cat.column(err_col).as_real(r);
    if (!std::isfinite(m0)) { refuse("no " + mag_col); continue; }
    if (!std::isfinite(e) || !(e > 0)) { refuse("no positive " + err_col); continue; }
    s.m0 = m0;
    s.m0_err = e;
    double feh = 0.0;
    if (rel.metallicity) {
      feh = value_or_nan(cat, col::kFeh, r);
      if (!std::isfinite(feh)) { refuse("no [Fe/H] for the metallicity term"); continue; }
      const double feh_err = value_or_nan(cat, col::kFehErr, r);
      var_feh = std::isfinite(feh_err) && feh_err > 0 ? feh_err * feh_err : 0.0;
    }
    double x = logp - rel.pivot_log_period;
    double xl = rel.break_log_period ? std::max(0.0, logp - *rel.break_log_period) : 0.0;
    std::string group = text_or_empty(cat, col::kGroup, r);
    auto anchor = std::find_if(o.anchors.begin(), o.anchors.end(), [&](const auto& a) { return a.group == group; });
    double mu = value_or_nan(cat, "mu_mag", r), mu_err = value_or_nan(cat, "mu_err_mag", r);
    double plx = value_or_nan(cat, col::kParallax, r), plx_err = value_or_nan(cat, col::kParallaxErr, r);
    if (anchor != o.anchors.end()) {
      s.kind = "anchor";
      s.used = true;
      c.a_star.push_back(c.stars.size());
      push(c.data.anchor, x, xl, feh, m0, e * e, r);
      c.data.group.push_back(static_cast<int>(anchor - o.anchors.begin()));
      c.stars.push_back(s);
      continue;
    }
    if (o.use_known_mu && std::isfinite(mu)) {
      s.kind = "known_distance";
      s.used = true;
      c.k_star.push_back(c.stars.size());
      push(c.data.known, x, xl, feh, m0, e * e, r);
      grow(c.data.mu, mu);
      grow(c.data.var_mu, std::isfinite(mu_err) ? mu_err * mu_err : 0.0);
      c.stars.push_back(s);
      continue;
    }
    if (!std::isfinite(plx)) { refuse("no distance: neither a parallax nor a known distance modulus"); continue; }
    s.kind = "parallax";
    double z = 0.0;
    if (o.zero_point == ZeroPointRecipe::kConstant) z = o.zero_point_mas;
    if (o.zero_point == ZeroPointRecipe::kLindegren2021) {
      double g = value_or_nan(cat, "gaia_g_mag", r), beta = value_or_nan(cat, "ecl_lat_deg", r);
      double n_param = value_or_nan(cat, "astrometric_params", r);
      bool six = n_param == 6;
      double colour = value_or_nan(cat, six ? "pseudocolour_um" : "nu_eff_um", r);
      if (!std::isfinite(g) || !std::isfinite(beta) || !std::isfinite(colour) || !std::isfinite(n_param)) {
        refuse("zero point inputs missing (G, colour, ecliptic latitude, astrometric parameters)");
        continue;
      }
      z = (six ? *tools.zp6 : *tools.zp5).zero_point_mas(g, colour, beta);
    }
    double inflate = 1.0;
    if (o.inflation == InflationRecipe::kConstant) inflate = o.inflation_factor;
    if (o.inflation == InflationRecipe::kElBadry2021) {
      double g = value_or_nan(cat, "gaia_g_mag", r);
      if (!std::isfinite(g)) { refuse("no G magnitude for the El-Badry et al. 2021 inflation"); continue; }
      inflate = el_badry_inflation(g);
    }
    if (!std::isfinite(plx_err) || !(plx_err > 0)) { refuse("no positive parallax error"); continue; }
    s.plx = plx - z;
    s.plx_err = plx_err * inflate;
    // The cut comes after the correction so that refused stars keep their parallax for plots.
    if (o.max_ruwe > 0) {
      double ruwe = value_or_nan(cat, "ruwe", r);
      if (std::isfinite(ruwe) && ruwe > o.max_ruwe) { refuse(fmt::format("RUWE {:.2f} > {}", ruwe, o.max_ruwe)); continue; }
    }
    if (o.space == FitSpace::kMagnitude && s.plx - offset.value <= 0) {
      refuse(fmt::format("parallax {:.4f} mas is not positive: it cannot enter a magnitude-space fit (use space = \"parallax\")", s.plx));
      continue;
    }
    s.used = true;
    c.p_star.push_back(c.stars.size());
    push(c.data.parallax, x, xl, feh, m0, e * e, r);
    grow(c.data.plx, s.plx);
    grow(c.data.var_plx, s.plx_err * s.plx_err);
    c.stars.push_back(s);
  }
  return c;
}

bool has_feh_errors(const FitData& d) {
  for (const FitData::Common* c : {&d.parallax, &d.known, &d.anchor})
    if (c->var_feh.size() && (c->var_feh > 0).any()) return true;
  return false;
}

FitSettings settings_for(const FitOptions& o, const RelationOptions& rel, const ParameterLayout& L) {
  FitSettings s;
  s.space = o.space;
  s.scatter_estimator = o.scatter_estimator;
  s.loss = o.loss;
  s.loss_scale = o.loss_scale;
  s.terms.pivot_log_period = rel.pivot_log_period;
  s.terms.has_break = rel.break_log_period.has_value();
  s.terms.break_log_period = rel.break_log_period.value_or(0.0);
  s.terms.has_metallicity = rel.metallicity;
  s.terms.n_anchors = static_cast<int>(o.anchors.size());
  s.terms.hierarchical = L.outlier >= 0;
  s.terms.feh_errors = L.feh_mean >= 0;
  s.terms.blends = L.blend >= 0;
  s.hierarchical = o.hierarchical;
  s.params.assign(L.size, ParamSpec{});
  s.params[L.alpha] = rel.alpha;
  s.params[L.beta] = rel.slope;
  if (L.beta_long >= 0) s.params[L.beta_long] = rel.slope_long;
  if (L.gamma >= 0) s.params[L.gamma] = rel.gamma;
  s.params[L.offset] = o.offset;
  s.params[L.sigma] = o.scatter;
  for (std::size_t g = 0; g < o.anchors.size(); ++g)
    s.params[L.anchor0 + static_cast<int>(g)] = ParamSpec{ParamMode::kPrior, o.anchors[g].mu, o.anchors[g].mu_err, true};
  if (s.terms.hierarchical) {
    s.params[L.outlier] = o.outlier_fraction;
    s.params[L.outlier_shift] = o.outlier_shift;
    s.params[L.outlier_width] = o.outlier_width;
  }
  if (s.terms.blends) {
    s.params[L.blend] = o.blend_fraction;
    s.params[L.blend_scale] = o.blend_scale;
  }
  if (L.distance_scale >= 0) {
    s.params[L.distance_scale] = o.distance_scale;
    s.params[L.distance_power] = o.distance_power;
    s.params[L.distance_exponent] = o.distance_exponent;
    // The space-density family is the generalised gamma with k = 2, a = 1 (distance_prior.hpp).
    if (o.hierarchical.prior == DistancePriorFamily::kSpaceDensity) {
      if (o.distance_power.mode == ParamMode::kFree && !o.distance_power.has_start)
        s.params[L.distance_power] = ParamSpec{ParamMode::kFixed, 2.0, 0, true};
      if (o.distance_exponent.mode == ParamMode::kFree && !o.distance_exponent.has_start)
        s.params[L.distance_exponent] = ParamSpec{ParamMode::kFixed, 1.0, 0, true};
    }
  }
  if (s.terms.feh_errors) {
    s.params[L.feh_mean] = o.feh_mean;
    s.params[L.feh_spread] = o.feh_spread;
  }
  return s;
}

// Parameters nothing in the data can constrain are held where they start, and said so.
void hold_unconstrained(const Calibrators& c, RelationResult& rr) {
  const ParameterLayout& L = rr.layout;
  if (L.distance_scale >= 0 && c.data.parallax.size() == 0)
    for (int j : {L.distance_scale, L.distance_power, L.distance_exponent})
      rr.settings.params[j] = ParamSpec{ParamMode::kFixed, j == L.distance_scale ? 1.0 : (j == L.distance_power ? 2.0 : 1.0), 0, true};
}

// Why the catalog's stars were refused, most common first (issue 19: "0 usable
// calibrators" gave no reason). Reasons that differ only in their numbers ("log P = 0.12
// outside ...") count together, shown by their first instance.
std::string refusal_summary(const Calibrators& c) {
  std::map<std::string, std::pair<int, std::string>> groups;
  for (const StarOutcome& s : c.stars) {
    if (s.used || s.reason.empty()) continue;
    std::string key;
    for (char ch : s.reason)
      if (!std::isdigit(static_cast<unsigned char>(ch)) && ch != '.' && ch != '-' && ch != '+') key += ch;
    auto& g = groups[key];
    if (g.first++ == 0) g.second = s.reason;
  }
  std::vector<std::pair<int, std::string>> sorted;
  for (const auto& [key, g] : groups) sorted.push_back(g);
  std::sort(sorted.begin(), sorted.end(), [](const auto& a, const auto& b) { return a.first > b.first; });
  std::string out;
  for (std::size_t i = 0; i < sorted.size() && i < 3; ++i)
    out += fmt::format("{}{} x '{}'{}", out.empty() ? "" : "; ", sorted[i].first, sorted[i].second,
                       sorted[i].first > 1 && sorted[i].second.find_first_of("0123456789") != std::string::npos
                           ? " (and the like)" : "");
  if (sorted.size() > 3) out += "; ...";
  return out.empty() ? "" : fmt::format(" (of {} catalog stars, refused: {})", c.stars.size(), out);
}

// Data rows with nothing to constrain a parameter make the fit degenerate; say so plainly.
void check_constrained(const FitOptions& o, const RelationOptions& rel, const Calibrators& c, const FitSettings& s,
                       const ParameterLayout& L) {
  if (c.data.stars() < 3)
    throw InputError({o.input_path, {}, {}}, "too_few_calibrators",
                     fmt::format("relation {}: {} usable calibrators, at least 3 are needed{}", rel.name,
                                 c.data.stars(), refusal_summary(c)));
  if (s.params[L.offset].mode == ParamMode::kFree && c.data.parallax.size() == 0)
    throw InputError({o.config_file, {}, "fit.offset", "line", "key"}, "config_value",
                     fmt::format("relation {}: the parallax offset is free but no parallax calibrator is used", rel.name));
  for (std::size_t g = 0; g < o.anchors.size(); ++g)
    if (std::count(c.data.group.begin(), c.data.group.end(), static_cast<int>(g)) == 0)
      spdlog::warn("relation {}: anchor {} has no star; its distance modulus stays at its prior", rel.name, o.anchors[g].group);
}

void fill_star_residuals(RelationResult& rr, const Calibrators& c) {
  StarResiduals res = star_residuals(c.data, rr.settings, rr.layout, rr.solution.theta);
  std::vector<std::size_t> order;
  order.insert(order.end(), c.p_star.begin(), c.p_star.end());
  order.insert(order.end(), c.k_star.begin(), c.k_star.end());
  order.insert(order.end(), c.a_star.begin(), c.a_star.end());
  for (std::size_t i = 0; i < order.size(); ++i) {
    StarOutcome& s = rr.stars[order[i]];
    s.residual = res.r[static_cast<Eigen::Index>(i)];
    s.model_abs_mag = res.model_abs_mag[static_cast<Eigen::Index>(i)];
    s.predicted = res.predicted[static_cast<Eigen::Index>(i)];
    if (res.membership.size()) s.membership = res.membership[static_cast<Eigen::Index>(i)];
  }
  rr.chi2 = res.r.square().sum();
  rr.neg2_log_likelihood =
      rr.settings.space == FitSpace::kHierarchical
          ? 2.0 * hierarchical_value(c.data, rr.settings, rr.layout, rr.solution.theta).neg_log_likelihood
          : (res.r.square() + (2.0 * std::numbers::pi * res.s2).log()).sum();
  rr.n_used = static_cast<int>(order.size());
  rr.n_free = 0;
  for (const auto& p : rr.settings.params) rr.n_free += p.mode == ParamMode::kFixed ? 0 : 1;
  rr.dof = rr.n_used - rr.n_free;
  rr.aic = rr.neg2_log_likelihood + 2.0 * rr.n_free;
  rr.bic = rr.neg2_log_likelihood + rr.n_free * std::log(static_cast<double>(rr.n_used));
}

std::uint64_t resample_seed(std::uint64_t seed, int b) {
  // splitmix64 of (seed, b): resample b draws the same stars whichever thread runs it.
  std::uint64_t z = seed + 0x9E3779B97F4A7C15ull * static_cast<std::uint64_t>(b + 1);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
  return z ^ (z >> 31);
}

// Runs B resamples over the configured threads with a progress bar. solve(b, rng) returns
// resample b's parameters, or nothing when its fit failed; the rows come back in b order,
// NaN for failures, identical for any thread count.
template <typename Solve>
Eigen::MatrixXd parallel_bootstrap(const FitOptions& o, int P, const std::string& label, Solve&& solve, int& failed) {
  const int B = o.bootstrap;
  Eigen::MatrixXd out = Eigen::MatrixXd::Constant(B, P, std::numeric_limits<double>::quiet_NaN());
  std::vector<char> ok(static_cast<std::size_t>(B), 0);
  Progress progress("bootstrap " + label, static_cast<std::size_t>(B));
  // Under MPI each rank solves its share of the resamples; every rank ends with all rows.
  distributed_for(
      static_cast<std::size_t>(B), worker_threads(o.threads),
      [&](std::size_t i) {
        const int b = static_cast<int>(i);
        Random rng(resample_seed(o.seed, b));
        std::optional<Eigen::VectorXd> theta = solve(rng);
        if (theta) {
          out.row(b) = theta->transpose();
          ok[i] = 1;
        }
        progress.advance();
      },
      [&](std::size_t i) {
        ByteWriter w;
        w.put(ok[i]);
        w.put_vector(Eigen::VectorXd(out.row(static_cast<Eigen::Index>(i)).transpose()));
        return w.release();
      },
      [&](std::size_t i, const std::string& bytes) {
        ByteReader r(bytes);
        ok[i] = r.get<char>();
        out.row(static_cast<Eigen::Index>(i)) = r.get_column().transpose();
      });
  progress.finish();
  failed = static_cast<int>(std::count(ok.begin(), ok.end(), 0));
  return out;
}

void run_bootstrap(const FitOptions& o, RelationResult& rr, const FitData& data) {
  if (o.bootstrap <= 0) return;
  // Resamples start at the optimum; 1e-9 in the cost and 1e-8 in the step are far below
  // their statistical spread.
  FitSettings settings = rr.settings;
  settings.function_tolerance = 1e-9;
  settings.parameter_tolerance = 1e-8;
  settings.initial_trust_region_radius = 1e8;
  auto solve = [&](Random& rng) -> std::optional<Eigen::VectorXd> {
    auto draw = [&](Eigen::Index n) {
      std::vector<Eigen::Index> idx(static_cast<std::size_t>(n));
      for (auto& i : idx) i = static_cast<Eigen::Index>(rng.below(static_cast<std::uint64_t>(n)));
      return idx;
    };
    std::vector<Eigen::Index> ai;
    // Anchors are resampled within each galaxy so each keeps its stars.
    for (int g = 0; g < rr.settings.terms.n_anchors; ++g) {
      std::vector<Eigen::Index> members;
      for (Eigen::Index i = 0; i < data.anchor.size(); ++i)
        if (data.group[i] == g) members.push_back(i);
      for (std::size_t k = 0; k < members.size(); ++k) ai.push_back(members[rng.below(members.size())]);
    }
    FitData sample = data.take(draw(data.parallax.size()), draw(data.known.size()), ai);
    // Each prior's centre is redrawn from its own Gaussian, so the resamples carry the
    // prior's uncertainty as the covariance does (method brief, section 4b).
    FitSettings drawn = settings;
    for (auto& p : drawn.params)
      if (p.mode == ParamMode::kPrior) p.value = rng.normal(p.value, p.prior_sigma);
    FitSolution s = solve_fit(sample, drawn, rr.layout, gauss_newton_start(sample, drawn, rr.layout, rr.solution.theta));
    if (!s.usable) return std::nullopt;
    return s.theta;
  };
  rr.bootstrap = parallel_bootstrap(o, rr.layout.size, rr.relation.name, solve, rr.bootstrap_failed);
}

std::string undetermined_reason(const std::string& name, double value) {
  if (name == "outlier_fraction")
    return fmt::format("outlier_fraction = {:.2g}: the data hold no outliers to measure it by; it has no error", value);
  if (name == "blend_fraction")
    return fmt::format("blend_fraction = {:.2g}: the data hold no blends to measure it by; it has no error", value);
  if (name == "blend_scale_mag")
    return "blend_scale_mag: without blends their brightening is not measured; it has no error";
  if (name == "sigma_int" && value < 1e-3)
    return fmt::format("sigma_int = {:.2g} mag, on its lower bound: consistent with no intrinsic scatter; it has no error", value);
  return "sigma_int cannot be estimated under a redescending (tukey) loss, which gives distant stars no weight: "
         "it is not reported as fitted; fix it, or use another loss";
}

double percentile(std::vector<double> v, double q) {
  if (v.empty()) return std::numeric_limits<double>::quiet_NaN();
  std::sort(v.begin(), v.end());
  double pos = q * static_cast<double>(v.size() - 1);
  auto lo = static_cast<std::size_t>(std::floor(pos));
  std::size_t hi = std::min(lo + 1, v.size() - 1);
  return v[lo] + (pos - static_cast<double>(lo)) * (v[hi] - v[lo]);
}

double standard_deviation(const std::vector<double>& v) {
  if (v.size() < 2) return std::numeric_limits<double>::quiet_NaN();
  double m = 0;
  for (double x : v) m += x;
  m /= static_cast<double>(v.size());
  double s = 0;
  for (double x : v) s += (x - m) * (x - m);
  return std::sqrt(s / static_cast<double>(v.size() - 1));
}

std::vector<double> bootstrap_column(const RelationResult& rr, int j) {
  std::vector<double> v;
  for (Eigen::Index b = 0; b < rr.bootstrap.rows(); ++b)
    if (std::isfinite(rr.bootstrap(b, j))) v.push_back(rr.bootstrap(b, j));
  return v;
}

int index_of(const ParameterLayout& L, const std::string& name) {
  for (std::size_t j = 0; j < L.names.size(); ++j)
    if (L.names[j] == name) return static_cast<int>(j);
  throw std::out_of_range("no fit parameter named " + name);
}

double coefficient_of(const StarTable* coefficients, const std::string& name) {
  if (!coefficients || !coefficients->has("name") || !coefficients->has("a_over_ebv")) return 0.0;
  const Column& n = coefficients->column("name");
  for (std::size_t i = 0; i < n.size(); ++i)
    if (!n.is_null(i) && n.text[i] == name) return coefficients->column("a_over_ebv").as_real(i);
  return 0.0;
}

JointResult run_joint(const FitOptions& o, const std::vector<RelationResult>& fits, const StarTable& cat,
                      const StarTable* coefficients) {
  JointResult jr;
  std::vector<bool> metallicity;
  for (const auto& rr : fits) {
    jr.relations.push_back(rr.relation.name);
    metallicity.push_back(rr.relation.metallicity);
  }
  std::vector<std::string> anchor_names;
  for (const auto& a : o.anchors) anchor_names.push_back(a.group);
  jr.layout = JointLayout::make(jr.relations, metallicity, o.joint_shared_slope, anchor_names);
  const JointLayout& L = jr.layout;
  JointSettings js;
  js.loss = o.loss;
  js.loss_scale = o.loss_scale;
  js.scatter_correlation = o.joint_scatter_correlation;
  js.fixed.assign(L.size, false);
  for (const auto& a : o.anchors) js.anchor_priors.emplace_back(a.mu, a.mu_err);
  if (o.offset.mode == ParamMode::kFixed) js.fixed[L.offset] = true;
  if (o.offset.mode == ParamMode::kPrior) jr.warnings.push_back("the offset's prior is not used by the joint fit (free there)");
  Eigen::VectorXd start = Eigen::VectorXd::Zero(L.size);
  double offset_sum = 0;
  for (std::size_t r = 0; r < fits.size(); ++r) {
    const RelationResult& rr = fits[r];
    js.sigma_int.push_back(rr.parameter("sigma_int"));
    start[L.alpha[r]] = rr.parameter("alpha");
    start[L.beta[r]] = rr.parameter("beta");
    if (rr.settings.params[rr.layout.beta].mode == ParamMode::kFixed) js.fixed[L.beta[r]] = true;
    if (L.gamma[r] >= 0) start[L.gamma[r]] = rr.parameter("gamma");
    offset_sum += rr.parameter("parallax_offset_mas");
  }
  for (std::size_t a = 0; a < o.anchors.size(); ++a) start[L.anchor0 + static_cast<int>(a)] = fits[0].parameter("mu_" + o.anchors[a].group);
  start[L.offset] = o.offset.mode == ParamMode::kFixed ? o.offset.value : offset_sum / static_cast<double>(fits.size());
  // Entries: every relation in which a star was used, as whichever kind of calibrator.
  JointData& d = jr.data;
  d.relations = static_cast<int>(fits.size());
  auto anchor_index = [&](std::size_t row) {
    const std::string g = cat.has(col::kGroup) && !cat.column(col::kGroup).is_null(row) ? cat.column(col::kGroup).text[row] : "";
    for (std::size_t a = 0; a < o.anchors.size(); ++a)
      if (o.anchors[a].group == g) return static_cast<int>(a);
    return -1;
  };
  bool any_parallax = false;
  for (std::size_t row = 0; row < cat.rows(); ++row) {
    int added = 0, kind = -1;
    double plx = 0, plx_err = 0;
    const double se = cat.has(col::kEbvErr) ? cat.column(col::kEbvErr).as_real(row) : 0.0;
    const double se2 = std::isfinite(se) ? se * se : 0.0;
    for (std::size_t r = 0; r < fits.size(); ++r) {
      const StarOutcome& s = fits[r].stars[row];
      if (!s.used) continue;
      int k = s.kind == "parallax" ? 0 : (s.kind == "known_distance" ? 1 : 2);
      if (kind >= 0 && k != kind) continue;  // the same star is the same kind in every relation
      kind = k;
      if (added == 0) d.first.push_back(static_cast<int>(d.relation.size()));
      const std::string& band = fits[r].relation.band;
      const double c = fits[r].relation.magnitude_column.empty() ? coefficient_of(coefficients, band) : 0.0;
      d.relation.push_back(static_cast<int>(r));
      d.x.push_back(s.log_period - fits[r].relation.pivot_log_period);
      d.m0.push_back(s.m0);
      // mag0_err holds the photometric and E(B-V) parts in quadrature: keep the first here.
      d.var_phot.push_back(std::max(s.m0_err * s.m0_err - c * c * se2, 1e-8));
      d.coefficient.push_back(c);
      plx = s.plx, plx_err = s.plx_err;
      ++added;
    }
    if (added == 0) continue;
    any_parallax = any_parallax || kind == 0;
    d.kind.push_back(kind);
    d.plx.push_back(kind == 0 ? plx : 0.0);
    d.var_plx.push_back(kind == 0 ? plx_err * plx_err : 0.0);
    const double mu = cat.has("mu_mag") ? cat.column("mu_mag").as_real(row) : 0.0;
    const double mu_err = cat.has("mu_err_mag") ? cat.column("mu_err_mag").as_real(row) : 0.0;
    d.mu.push_back(kind == 1 ? mu : 0.0);
    d.var_mu.push_back(kind == 1 && std::isfinite(mu_err) ? mu_err * mu_err : 0.0);
    d.group.push_back(kind == 2 ? anchor_index(row) : -1);
    d.var_ebv.push_back(coefficients ? se2 : 0.0);
    const double feh = cat.has(col::kFeh) ? cat.column(col::kFeh).as_real(row) : 0.0;
    d.feh.push_back(std::isfinite(feh) ? feh : 0.0);
    d.row.push_back(row);
  }
  d.first.push_back(static_cast<int>(d.relation.size()));
  if (!any_parallax) js.fixed[L.offset] = true;  // nothing constrains it
  jr.stars = d.stars();
  if (jr.stars < 3)
    throw InputError({o.input_path, {}, {}}, "too_few_calibrators", "the joint fit has fewer than 3 calibrators");
  if (!coefficients)
    jr.warnings.push_back("no COEFFS table: E(B-V) errors are taken as independent between relations");
  jr.n_free = static_cast<int>(std::count(js.fixed.begin(), js.fixed.end(), false));
  jr.solution = solve_joint(d, js, L, start);
  if (!jr.solution.theta.allFinite())
    throw InputError({o.input_path, {}, {}}, "degenerate_fit",
                     "the joint fit has no finite solution; look for absurd values among the calibrators");
  if (!jr.solution.usable) jr.warnings.push_back("the joint solver did not reach a usable solution: " + jr.solution.message);
  if (o.bootstrap > 0) {
    // Strata: parallax stars, known-distance stars, and each anchor galaxy's stars.
    std::map<int, std::vector<int>> strata;
    for (int i = 0; i < d.stars(); ++i) strata[d.kind[i] == 2 ? 2 + d.group[i] : d.kind[i]].push_back(i);
    auto solve = [&](Random& rng) -> std::optional<Eigen::VectorXd> {
      std::vector<int> stars;
      for (const auto& [key, members] : strata)
        for (std::size_t k = 0; k < members.size(); ++k) stars.push_back(members[rng.below(members.size())]);
      JointSolution s = solve_joint(d.take(stars), js, L, jr.solution.theta, false);
      if (!s.usable) return std::nullopt;
      return s.theta;
    };
    jr.bootstrap = parallel_bootstrap(o, L.size, "joint", solve, jr.bootstrap_failed);
  }
  for (const auto& w : jr.warnings) spdlog::warn("joint fit: {}", w);
  return jr;
}

// A parameter's setting as the result file records it.
nlohmann::json param_json(const ParamSpec& p) {
  return {{"mode", std::string(kParamModeNames.name(p.mode))}, {"value", p.value}, {"prior_sigma", p.prior_sigma}};
}

}  // namespace

double RelationResult::parameter(const std::string& name) const { return solution.theta[index_of(layout, name)]; }
double RelationResult::error(const std::string& name) const {
  int j = index_of(layout, name);
  if (!covariance_ok || !std::isfinite(covariance(j, j))) return std::numeric_limits<double>::quiet_NaN();
  return std::sqrt(std::max(0.0, covariance(j, j)));
}
double RelationResult::bootstrap_error(const std::string& name) const {
  return standard_deviation(bootstrap_column(*this, index_of(layout, name)));
}

FitResult run_fit(const FitOptions& o, const StarTable& cat, const StarTable* coefficients) {
  throw_if_invalid(o.check(), o.config_file);
  ParallaxTools tools;
  if (o.zero_point == ZeroPointRecipe::kLindegren2021) {
    tools.zp5 = ZeroPointTable::from_file(o.zero_point_table_5p);
    tools.zp6 = ZeroPointTable::from_file(o.zero_point_table_6p);
  }
  std::vector<std::string> anchor_names;
  for (const auto& a : o.anchors) anchor_names.push_back(a.group);
  FitResult result;
  for (const auto& rel : o.relations) {
    RelationResult rr;
    rr.relation = rel;
    Calibrators c = select_calibrators(o, rel, cat, tools, o.offset);
    const bool hierarchical = o.space == FitSpace::kHierarchical;
    HierarchicalSettings grid = o.hierarchical;
    const int bins = hierarchical && o.hierarchical.prior == DistancePriorFamily::kSmoothHistogram &&
                             c.data.parallax.size() > 0
                         ? histogram_grid(c.data, grid)
                         : 0;
    rr.layout = ParameterLayout::for_terms(ModelTerms{rel.pivot_log_period, rel.break_log_period.has_value(),
                                                      rel.break_log_period.value_or(0.0), rel.metallicity,
                                                      static_cast<int>(o.anchors.size()), hierarchical,
                                                      hierarchical && rel.metallicity && has_feh_errors(c.data), bins,
                                                      hierarchical && o.hierarchical.blends != BlendComponent::kNone},
                                           anchor_names);
    rr.settings = settings_for(o, rel, rr.layout);
    rr.settings.hierarchical = grid;
    hold_unconstrained(c, rr);
    rr.stars = c.stars;
    check_constrained(o, rel, c, rr.settings, rr.layout);
    if (o.space == FitSpace::kMagnitude) {
      int noisy = 0;
      for (Eigen::Index i = 0; i < c.data.parallax.size(); ++i)
        noisy += std::sqrt(c.data.var_plx[i]) > 0.1 * c.data.plx[i] ? 1 : 0;
      if (noisy > 0) {
        rr.warnings.push_back(fmt::format(
            "{} of {} parallax stars have sigma_pi/pi > 0.1: a magnitude-space fit of such parallaxes is biased "
            "(Lutz-Kelker) and drops non-positive parallaxes; fit in parallax space instead",
            noisy, c.data.parallax.size()));
      }
    }
    // Fit, then clip |r| > k and refit until nothing more is clipped.
    FitData data = c.data;
    Eigen::VectorXd start = starting_vector(data, rr.settings, rr.layout);
    rr.solution = solve_fit(data, rr.settings, rr.layout, start);
    for (int pass = 0; o.clip_sigma > 0 && pass < o.clip_iterations; ++pass) {
      StarResiduals res = star_residuals(data, rr.settings, rr.layout, rr.solution.theta);
      std::vector<bool> dp(data.parallax.size()), dk(data.known.size()), da(data.anchor.size());
      int clipped = 0;
      Eigen::Index i = 0;
      auto mark = [&](std::vector<bool>& drop, std::vector<std::size_t>& star_index) {
        for (std::size_t k = 0; k < drop.size(); ++k, ++i) {
          if (std::abs(res.r[i]) > o.clip_sigma) {
            drop[k] = true;
            ++clipped;
            StarOutcome& s = rr.stars[star_index[k]];
            s.used = false;
            s.reason = fmt::format("clipped: |r| = {:.2f} > {}", std::abs(res.r[i]), o.clip_sigma);
          }
        }
      };
      mark(dp, c.p_star);
      mark(dk, c.k_star);
      mark(da, c.a_star);
      if (clipped == 0) break;
      rr.n_clipped += clipped;
      auto keep_index = [](const std::vector<std::size_t>& v, const std::vector<bool>& drop) {
        std::vector<std::size_t> out;
        for (std::size_t k = 0; k < v.size(); ++k)
          if (!drop[k]) out.push_back(v[k]);
        return out;
      };
      c.p_star = keep_index(c.p_star, dp);
      c.k_star = keep_index(c.k_star, dk);
      c.a_star = keep_index(c.a_star, da);
      data = data.without(dp, dk, da);
      c.data = data;
      check_constrained(o, rel, c, rr.settings, rr.layout);
      rr.solution = solve_fit(data, rr.settings, rr.layout, rr.solution.theta);
    }
    c.data = data;
    if (!rr.solution.theta.allFinite() || !std::isfinite(rr.solution.cost))
      throw InputError({o.input_path, {}, {}}, "degenerate_fit",
                       fmt::format("relation {}: the fit has no finite solution ({}); look for absurd values among the "
                                   "calibrators (parallax, period, [Fe/H]) or the zero-point table",
                                   rel.name, rr.solution.message));
    if (!rr.solution.usable)
      rr.warnings.push_back("the solver did not reach a usable solution: " + rr.solution.message);
    if (hierarchical) {
      rr.covariance_ok = hierarchical_covariance(data, rr.settings, rr.layout, rr.solution.theta, rr.covariance, rr.undetermined);
    } else {
      rr.covariance_ok = fit_covariance(data, rr.settings, rr.layout, rr.solution.theta, rr.covariance);
      // A redescending loss gives a star beyond its scale no weight at all, so the Gaussian
      // likelihood of the rest drives sigma_int down: it is not an estimate of the scatter.
      if (o.loss == LossKind::kTukey && o.scatter.mode != ParamMode::kFixed) rr.undetermined.push_back("sigma_int");
    }
    for (const auto& name : rr.undetermined) {
      const int j = index_of(rr.layout, name);
      rr.covariance.row(j).setConstant(std::numeric_limits<double>::quiet_NaN());
      rr.covariance.col(j).setConstant(std::numeric_limits<double>::quiet_NaN());
      rr.warnings.push_back(undetermined_reason(name, rr.solution.theta[j]));
    }
    if (!rr.covariance_ok) rr.warnings.push_back("the covariance could not be computed (degenerate parameters?)");
    fill_star_residuals(rr, c);
    run_bootstrap(o, rr, data);
    for (const auto& w : rr.warnings) spdlog::warn("relation {}: {}", rel.name, w);
    result.relations.push_back(std::move(rr));
  }
  if (o.joint) result.joint = run_joint(o, result.relations, cat, coefficients);
  return result;
}

nlohmann::json FitResult::to_json(const FitOptions& o) const {
  using nlohmann::json;
  json out;
  out["schema"] = "rungcal-fit";
  out["schema_version"] = kFitSchemaVersion;
  out["provenance"] = {{"stage", provenance.stage},
                       {"software_version", provenance.software_version},
                       {"software_commit", provenance.software_commit},
                       {"created_utc", provenance.created_utc},
                       {"config_sha256", provenance.config_sha256}};
  for (const auto& in : provenance.inputs)
    out["provenance"]["inputs"].push_back({{"path", in.path}, {"sha256", in.sha256}, {"rows", in.rows}});
  out["model"] = {{"space", std::string(kFitSpaceNames.name(o.space))},
                  {"loss", std::string(kLossNames.name(o.loss))},
                  {"scatter_estimator", std::string(kScatterEstimatorNames.name(o.scatter_estimator))},
                  {"hierarchical", {{"distance_prior", std::string(kDistancePriorNames.name(o.hierarchical.prior))},
                                    {"quadrature_nodes", o.hierarchical.quadrature_nodes},
                                    {"histogram_step_mag", o.hierarchical.histogram_step},
                                    {"histogram_walk_sigma", o.hierarchical.histogram_walk_sigma},
                                    {"histogram_margin_mag", o.hierarchical.histogram_margin},
                                    {"outlier_mag_width", o.hierarchical.outlier_mag_width},
                                    {"outlier_mag_shift", o.hierarchical.outlier_mag_shift},
                                    {"outlier_parallax_factor", o.hierarchical.outlier_parallax_factor},
                                    {"blend_component", std::string(kBlendComponentNames.name(o.hierarchical.blends))},
                                    {"blend_min_mag", o.hierarchical.blend_min_mag},
                                    {"blend_fraction", param_json(o.blend_fraction)},
                                    {"blend_scale_mag", param_json(o.blend_scale)}}},
                  {"loss_scale", o.loss_scale},
                  {"clip_sigma", o.clip_sigma},
                  {"zero_point", std::string(kZeroPointRecipeNames.name(o.zero_point))},
                  {"zero_point_mas", o.zero_point_mas},
                  {"inflation", std::string(kInflationRecipeNames.name(o.inflation))},
                  {"inflation_factor", o.inflation_factor},
                  {"max_ruwe", o.max_ruwe},
                  {"use_known_distance", o.use_known_mu},
                  {"offset", {{"mode", std::string(kParamModeNames.name(o.offset.mode))}, {"value", o.offset.value}, {"prior_sigma", o.offset.prior_sigma}}},
                  {"scatter", {{"mode", std::string(kParamModeNames.name(o.scatter.mode))}, {"value", o.scatter.value}}},
                  {"anchors", [&] {
                     nlohmann::json a = nlohmann::json::array();
                     for (const auto& an : o.anchors) a.push_back({{"group", an.group}, {"mu", an.mu}, {"mu_err", an.mu_err}});
                     return a;
                   }()},
                  {"joint", o.joint},
                  {"bootstrap", o.bootstrap},
                  {"seed", o.seed},
                  {"extinction", extinction.is_null() ? nlohmann::json::object() : extinction}};
  auto finite_or_null = [](double v) { return std::isfinite(v) ? json(v) : json(nullptr); };
  for (const auto& rr : relations) {
    json r;
    r["name"] = rr.relation.name;
    r["band"] = rr.relation.band;
    r["pivot_log_period"] = rr.relation.pivot_log_period;
    if (rr.relation.break_log_period) r["break_log_period"] = *rr.relation.break_log_period;
    r["metallicity"] = rr.relation.metallicity;
    // The relation's resolved selection: with the model and config text, what it was fitted on.
    r["selection"] = {{"classes", rr.relation.classes},
                      {"modes", rr.relation.modes},
                      {"fundamentalize", rr.relation.fundamentalize},
                      {"log_period_range", {finite_or_null(rr.relation.min_log_period), finite_or_null(rr.relation.max_log_period)}},
                      {"magnitude_column", rr.relation.magnitude_column.empty() ? "mag0_" + rr.relation.band : rr.relation.magnitude_column},
                      {"slope", {{"mode", std::string(kParamModeNames.name(rr.relation.slope.mode))},
                                 {"value", rr.relation.slope.value},
                                 {"prior_sigma", rr.relation.slope.prior_sigma}}}};
    r["parameter_names"] = rr.layout.names;
    for (int j = 0; j < rr.layout.size; ++j) {
      const auto& name = rr.layout.names[j];
      std::vector<double> boot = bootstrap_column(rr, j);
      json p = {{"name", name},
                {"value", rr.solution.theta[j]},
                {"mode", std::string(kParamModeNames.name(rr.settings.params[j].mode))},
                {"error", rr.settings.params[j].mode == ParamMode::kFixed ? json(0.0) : finite_or_null(rr.error(name))},
                {"bootstrap_error", finite_or_null(rr.bootstrap_error(name))},
                {"p16", finite_or_null(percentile(boot, 0.16))},
                {"p50", finite_or_null(percentile(boot, 0.50))},
                {"p84", finite_or_null(percentile(boot, 0.84))}};
      if (rr.settings.params[j].mode == ParamMode::kPrior)
        p["prior"] = {{"mean", rr.settings.params[j].value}, {"sigma", rr.settings.params[j].prior_sigma}};
      if (std::find(rr.undetermined.begin(), rr.undetermined.end(), name) != rr.undetermined.end()) {
        p["determined"] = false;
        p["error"] = nullptr;
      }
      r["parameters"].push_back(p);
    }
    json cov = json::array(), corr = json::array();
    for (int i = 0; i < rr.layout.size; ++i) {
      json row = json::array(), crow = json::array();
      for (int j = 0; j < rr.layout.size; ++j) {
        double cij = rr.covariance_ok ? rr.covariance(i, j) : std::numeric_limits<double>::quiet_NaN();
        row.push_back(finite_or_null(cij));
        double d = rr.covariance_ok ? std::sqrt(rr.covariance(i, i) * rr.covariance(j, j)) : 0.0;
        crow.push_back(d > 0 ? json(cij / d) : json(nullptr));
      }
      cov.push_back(row);
      corr.push_back(crow);
    }
    r["covariance"] = cov;
    r["correlation"] = corr;
    int rejected = 0;
    for (const auto& s : rr.stars) rejected += s.used ? 0 : 1;
    r["statistics"] = {{"chi2", rr.chi2},
                       {"dof", rr.dof},
                       {"n_used", rr.n_used},
                       {"n_rejected", rejected},
                       {"n_clipped", rr.n_clipped},
                       {"n_free_parameters", rr.n_free},
                       {"neg2_log_likelihood", rr.neg2_log_likelihood},
                       {"aic", rr.aic},
                       {"bic", rr.bic},
                       {"bootstrap_resamples", rr.bootstrap.rows()},
                       {"bootstrap_failed", rr.bootstrap_failed}};
    r["solver"] = {{"termination", rr.solution.termination},
                   {"message", rr.solution.message},
                   {"iterations", rr.solution.iterations},
                   {"usable", rr.solution.usable},
                   {"brief_report", rr.solution.brief_report}};
    r["rejected"] = json::array();
    r["used"] = json::array();
    for (const auto& s : rr.stars) {
      if (!s.used) r["rejected"].push_back({{"id", s.id}, {"reason", s.reason}});
      else r["used"].push_back(s.id);
    }
    r["warnings"] = rr.warnings;
    r["undetermined"] = rr.undetermined;
    if (rr.layout.distance_bin0 >= 0)
      r["distance_prior_grid"] = {{"first_modulus", rr.settings.hierarchical.histogram_start},
                                  {"step_mag", rr.settings.hierarchical.histogram_step},
                                  {"bins", rr.layout.distance_bins + 1}};
    out["relations"].push_back(r);
  }
  if (joint) {
    const JointSolution& js = joint->solution;
    json j;
    j["relations"] = joint->relations;
    j["shared_slope"] = o.joint_shared_slope;
    j["scatter_correlation"] = o.joint_scatter_correlation;
    j["parameter_names"] = joint->layout.names;
    for (int p = 0; p < joint->layout.size; ++p) {
      double e = js.covariance_ok ? std::sqrt(std::max(0.0, js.covariance(p, p))) : std::nan("");
      std::vector<double> boot;
      for (Eigen::Index b = 0; b < joint->bootstrap.rows(); ++b)
        if (std::isfinite(joint->bootstrap(b, p))) boot.push_back(joint->bootstrap(b, p));
      j["parameters"].push_back({{"name", joint->layout.names[p]},
                                 {"value", js.theta[p]},
                                 {"error", finite_or_null(e)},
                                 {"bootstrap_error", finite_or_null(standard_deviation(boot))},
                                 {"p16", finite_or_null(percentile(boot, 0.16))},
                                 {"p50", finite_or_null(percentile(boot, 0.50))},
                                 {"p84", finite_or_null(percentile(boot, 0.84))}});
    }
    json cov = json::array();
    for (int a = 0; a < joint->layout.size; ++a) {
      json row = json::array();
      for (int b = 0; b < joint->layout.size; ++b) row.push_back(js.covariance_ok ? finite_or_null(js.covariance(a, b)) : json(nullptr));
      cov.push_back(row);
    }
    j["covariance"] = cov;
    j["statistics"] = {{"chi2", js.chi2}, {"n_stars", joint->stars}, {"n_entries", js.entries},
                       {"n_free_parameters", joint->n_free}, {"dof", js.entries - joint->n_free},
                       {"bootstrap_resamples", joint->bootstrap.rows()}, {"bootstrap_failed", joint->bootstrap_failed}};
    j["solver"] = {{"termination", js.termination}, {"message", js.message}, {"iterations", js.iterations}, {"usable", js.usable}};
    j["warnings"] = joint->warnings;
    out["joint"] = j;
  }
  return out;
}

std::string fit_summary(const FitResult& result) {
  std::string out;
  if (result.joint) {
    const JointResult& j = *result.joint;
    std::string names;
    for (const auto& n : j.relations) names += (names.empty() ? "" : " + ") + n;
    out += fmt::format("joint ({}): {} stars, {} magnitudes, chi2 = {:.2f}\n", names, j.stars, j.solution.entries, j.solution.chi2);
    for (int p = 0; p < j.layout.size; ++p) {
      double e = j.solution.covariance_ok ? std::sqrt(std::max(0.0, j.solution.covariance(p, p))) : std::nan("");
      out += fmt::format("  {:<22} {:>10.4f} +- {:.4f}", j.layout.names[p], j.solution.theta[p], e);
      std::vector<double> boot;
      for (Eigen::Index b = 0; b < j.bootstrap.rows(); ++b)
        if (std::isfinite(j.bootstrap(b, p))) boot.push_back(j.bootstrap(b, p));
      double be = standard_deviation(boot);
      if (std::isfinite(be)) out += fmt::format("  (bootstrap {:.4f})", be);
      out += "\n";
    }
  }
  for (const auto& rr : result.relations) {
    out += fmt::format("{}: {} stars used, {} refused, chi2/dof = {:.2f}/{}\n", rr.relation.name, rr.n_used,
                       rr.stars.size() - static_cast<std::size_t>(rr.n_used), rr.chi2, rr.dof);
    if (rr.layout.distance_bin0 >= 0)
      out += fmt::format("  distance prior: smooth histogram, {} bins of {:.2f} mag from mu = {:.2f}\n",
                         rr.layout.distance_bins + 1, rr.settings.hierarchical.histogram_step,
                         rr.settings.hierarchical.histogram_start);
    for (int j = 0; j < rr.layout.size; ++j) {
      const std::string& name = rr.layout.names[j];
      if (j >= rr.layout.distance_bin0 && j < rr.layout.distance_bin0 + rr.layout.distance_bins) continue;
      if (std::find(rr.undetermined.begin(), rr.undetermined.end(), name) != rr.undetermined.end()) {
        out += fmt::format("  {:<22} {:>10.4f} (not determined: no error)\n", name, rr.solution.theta[j]);
        continue;
      }
      if (rr.settings.params[j].mode == ParamMode::kFixed) {
        out += fmt::format("  {:<22} {:>10.4f} (fixed)\n", name, rr.solution.theta[j]);
        continue;
      }
      double e = rr.error(name);
      if (std::isfinite(e)) out += fmt::format("  {:<22} {:>10.4f} +- {:.4f}", name, rr.solution.theta[j], e);
      else out += fmt::format("  {:<22} {:>10.4f} (on its boundary: no covariance error)", name, rr.solution.theta[j]);
      double be = rr.bootstrap_error(name);
      if (std::isfinite(be)) out += fmt::format("  (bootstrap {:.4f})", be);
      out += "\n";
    }
  }
  return out;
}

namespace {

// Every bootstrap resample's parameters, one row per resample and parameter (NaN for a
// failed resample), so a user can form any statistic of them.
StarTable bootstrap_table(const FitResult& result) {
  StarTable t;
  t.add_column("relation", ColumnType::kText, "", "relation, or 'joint'");
  t.add_column("resample", ColumnType::kInteger, "", "resample index b (seeded per b)");
  t.add_column("parameter", ColumnType::kText);
  t.add_column("value", ColumnType::kReal, "", "parameter's value in resample b (NaN: failed)");
  auto add = [&](const std::string& relation, const std::vector<std::string>& names,
                 const Eigen::MatrixXd& samples) {
    for (Eigen::Index b = 0; b < samples.rows(); ++b)
      for (Eigen::Index j = 0; j < samples.cols(); ++j) {
        t.column("relation").push_text(relation);
        t.column("resample").push_integer(b);
        t.column("parameter").push_text(names[static_cast<std::size_t>(j)]);
        t.column("value").push_real(samples(b, j));
      }
  };
  for (const auto& rr : result.relations) add(rr.relation.name, rr.layout.names, rr.bootstrap);
  if (result.joint) add("joint", result.joint->layout.names, result.joint->bootstrap);
  return t;
}

}  // namespace

FitResult fit_catalog_file(const FitOptions& o) {
  SourceTable in = read_fits_table(o.input_path, {"CATALOG", 0});
  std::optional<SourceTable> coeffs;
  if (o.joint) {
    try {
      coeffs = read_fits_table(o.input_path, {"COEFFS", 0});
    } catch (const InputError& e) {
      if (e.rule() != "fits_hdu") throw;
    }
  }
  FitResult result = run_fit(o, in.table, coeffs ? &coeffs->table : nullptr);
  result.provenance = Provenance::for_stage("fit");
  result.provenance.config_sha256 = o.config_sha256;
  for (const auto& [keyword, field] : {std::pair{"RGLAW", "law"}, std::pair{"RGRV", "r_v"}, std::pair{"RGBNDSHA", "band_table_sha256"}})
    if (const Keyword* k = in.table.keyword(keyword))
      std::visit([&, f = field](const auto& v) { result.extinction[f] = v; }, k->value);
  result.provenance.inputs.push_back({o.input_path, sha256_file(o.input_path), static_cast<std::int64_t>(in.table.rows())});
  if (o.zero_point == ZeroPointRecipe::kLindegren2021) {
    result.provenance.inputs.push_back({o.zero_point_table_5p, sha256_file(o.zero_point_table_5p), -1});
    result.provenance.inputs.push_back({o.zero_point_table_6p, sha256_file(o.zero_point_table_6p), -1});
  }
  // Residuals per star and relation.
  StarTable res;
  for (const char* c : {"relation", "id", "kind", "reason"}) res.add_column(c, ColumnType::kText);
  res.add_column("used", ColumnType::kBoolean);
  res.add_column("log_period_f", ColumnType::kReal, "", "log10 of the (fundamentalized) period in days");
  res.add_column("m0", ColumnType::kReal, "mag", "magnitude the relation uses");
  res.add_column("m0_err", ColumnType::kReal, "mag");
  res.add_column("abs_mag_model", ColumnType::kReal, "mag", "relation's absolute magnitude");
  res.add_column("residual", ColumnType::kReal, "", "normalised residual at the optimum");
  res.add_column("parallax_corrected_mas", ColumnType::kReal, "mas", "parallax minus zero point");
  res.add_column("parallax_err_mas", ColumnType::kReal, "mas", "inflated parallax error");
  res.add_column("predicted", ColumnType::kReal, "", "photometric parallax (mas, parallax space) or predicted m0");
  // Where zero-point, offset and metallicity problems show: [Fe/H] and G beside each residual.
  res.add_column("feh", ColumnType::kReal, "", "[Fe/H] (dex)");
  res.add_column("gaia_g_mag", ColumnType::kReal, "mag");
  res.add_column("membership", ColumnType::kReal, "", "hierarchical fit: probability of being a member, not an outlier");
  for (const auto& rr : result.relations) {
    for (const auto& s : rr.stars) {
      res.column("relation").push_text(rr.relation.name);
      res.column("id").push_text(s.id);
      s.kind.empty() ? res.column("kind").push_null() : res.column("kind").push_text(s.kind);
      s.reason.empty() ? res.column("reason").push_null() : res.column("reason").push_text(s.reason);
      res.column("used").push_boolean(s.used);
      res.column("log_period_f").push_real(s.kind.empty() && s.log_period == 0 ? std::nan("") : s.log_period);
      res.column("m0").push_real(s.m0_err > 0 ? s.m0 : std::nan(""));
      res.column("m0_err").push_real(s.m0_err > 0 ? s.m0_err : std::nan(""));
      res.column("abs_mag_model").push_real(s.model_abs_mag);
      res.column("residual").push_real(s.residual);
      res.column("parallax_corrected_mas").push_real(s.plx);
      res.column("parallax_err_mas").push_real(s.plx_err);
      res.column("predicted").push_real(s.predicted);
      res.column("feh").push_real(in.table.has(col::kFeh) ? in.table.column(col::kFeh).as_real(s.row) : std::nan(""));
      res.column("gaia_g_mag").push_real(in.table.has("gaia_g_mag") ? in.table.column("gaia_g_mag").as_real(s.row) : std::nan(""));
      res.column("membership").push_real(s.membership);
    }
  }
  stamp_provenance(res, result.provenance, "fit_residuals");
  std::string residuals = o.residuals_path;
  if (residuals.empty()) {
    std::filesystem::path p(o.output_path);
    residuals = (p.parent_path() / (p.stem().string() + "_residuals.fits")).string();
  }
  if (!Cluster::world().writes_outputs()) return result;
  StarTable boot = bootstrap_table(result);
  stamp_provenance(boot, result.provenance, "fit_bootstrap");
  std::vector<std::pair<std::string, const StarTable*>> hdus{{"RESIDUALS", &res}};
  if (boot.rows() > 0) hdus.emplace_back("BOOTSTRAP", &boot);
  write_fits_tables(residuals, hdus);
  write_file_atomically(o.output_path, result.to_json(o).dump(2) + "\n");
  return result;
}

}  // namespace rungcal
