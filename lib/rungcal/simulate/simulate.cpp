// SPDX-License-Identifier: MIT
#include "rungcal/simulate/simulate.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <numbers>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/core/version.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {
namespace {

constexpr double kTwoPi = 2.0 * std::numbers::pi;

// A light-curve shape: m(phi) - <m>_intensity = sum_k a_k cos(2 pi k phi + phase_k) - offset.
struct LightCurveShape {
  std::vector<double> amplitude;  // a_1..a_K in mag (for V; other bands scale)
  std::vector<double> phase;      // phase_1..phase_K in radians
  double epoch = 0;               // time of phase 0
};

double shape_value(const LightCurveShape& s, double scale, double phi) {
  double v = 0;
  for (std::size_t k = 0; k < s.amplitude.size(); ++k)
    v += scale * s.amplitude[k] * std::cos(kTwoPi * static_cast<double>(k + 1) * phi + s.phase[k]);
  return v;
}

// <m> - m0 of m0 + shape: -2.5 log10 of the phase-averaged flux. The rectangle rule is
// exact to rounding for a trigonometric polynomial sampled this finely.
double intensity_mean_offset(const LightCurveShape& s, double scale) {
  constexpr int kSteps = 4096;
  double flux = 0;
  for (int i = 0; i < kSteps; ++i)
    flux += std::pow(10.0, -0.4 * shape_value(s, scale, (i + 0.5) / kSteps));
  return -2.5 * std::log10(flux / kSteps);
}

LightCurveShape draw_shape(Random& rng, bool overtone) {
  LightCurveShape s;
  double a1 = overtone ? rng.uniform(0.08, 0.18) : rng.uniform(0.15, 0.40);
  double r21 = overtone ? rng.uniform(0.05, 0.20) : rng.uniform(0.30, 0.50);
  double r31 = overtone ? rng.uniform(0.02, 0.08) : rng.uniform(0.10, 0.30);
  double p1 = rng.uniform(0, kTwoPi);
  double phi21 = overtone ? rng.uniform(4.4, 5.0) : rng.uniform(3.9, 4.8);
  double phi31 = overtone ? rng.uniform(2.8, 3.6) : rng.uniform(2.2, 3.4);
  s.amplitude = {a1, r21 * a1, r31 * a1};
  s.phase = {p1, std::fmod(phi21 + 2 * p1, kTwoPi), std::fmod(phi31 + 3 * p1, kTwoPi)};
  return s;
}

const TrueRelation& relation_for(const SimulateOptions& o, const std::string& band) {
  for (const auto& r : o.relations)
    if (r.band == band) return r;
  throw InputError({}, "config_value", fmt::format("no simulated relation for band '{}'", band));
}

// Values are written at the precision published tables carry, which keeps sample_data/
// small and looks like real input.
double rounded(double x, int decimals) {
  double f = std::pow(10.0, decimals);
  return std::round(x * f) / f;
}

double parallax_error_for(const SimulateOptions& o, double g_mag) {
  // Grows with magnitude roughly as Gaia's does (common practice shape, invented scale).
  return o.parallax_error_floor_mas * (1.0 + std::pow(10.0, 0.2 * (std::max(g_mag, 8.0) - 13.0)));
}

}  // namespace

std::string SimulateOptions::check() const {
  if (n_calibrators < 3) return "n_calibrators: at least 3";
  if (n_targets < 1) return "n_targets: at least 1";
  if (n_lightcurve_stars < 0 || n_lightcurve_stars > n_calibrators)
    return "n_lightcurve_stars: between 0 and n_calibrators";
  for (double f : {first_overtone_fraction, outlier_fraction, far_fraction})
    if (f < 0 || f > 1) return "fractions: each between 0 and 1";
  if (!(r_v > 0)) return "r_v: must be positive";
  if (relations.empty()) return "relations: at least one band";
  for (const auto& b : lightcurve_bands) {
    bool found =
        std::any_of(relations.begin(), relations.end(), [&](const auto& r) { return r.band == b; });
    if (!found) return fmt::format("lightcurve_bands: '{}' has no relation", b);
  }
  for (const auto& b : target_bands) {
    bool found =
        std::any_of(relations.begin(), relations.end(), [&](const auto& r) { return r.band == b; });
    if (!found) return fmt::format("target_bands: '{}' has no relation", b);
  }
  for (const auto& k : clusters) {
    if (k.name.empty() || k.name == field_group)
      return "cluster.name: required, and not the field_group";
    if (!(k.mu > 5 && k.mu < 16)) return "cluster.mu: must be 5 to 16 (100 pc to 16 kpc)";
    if (k.members < 1 || k.members > 200) return "cluster.members: must be 1 to 200";
  }
  if (!(cluster_parallax_error_mas > 0)) return "cluster_parallax_error_mas: must be positive";
  for (const auto& a : anchors) {
    const bool taken =
        a.name == field_group || std::any_of(clusters.begin(), clusters.end(),
                                             [&](const auto& k) { return k.name == a.name; });
    if (a.name.empty() || taken)
      return "anchor.name: required, and neither the field_group nor a cluster's";
    if (!(a.mu > 16 && a.mu < 26)) return "anchor.mu: must be 16 to 26 (16 kpc to 16 Mpc)";
    if (a.members < 1 || a.members > 2000) return "anchor.members: must be 1 to 2000";
    if (!(a.mu_err > 0 && a.mu_err < 1)) return "anchor.mu_err: must be above 0 and below 1 mag";
    if (!(a.ebv >= 0 && a.ebv <= 1)) return "anchor.ebv: must be 0 to 1 mag";
  }
  if (!(anchor_correlation >= 0 && anchor_correlation < 1))
    return "anchor_correlation: must be 0 to below 1 (a shared systematic)";
  return "";
}

namespace {

// A [[cluster]] or [[anchor]] table's name, true modulus and member count.
template <class Group>
Group group_from(const ConfigSection& k) {
  Group g;
  g.name = k.require_string("name");
  g.mu = k.number_or("mu", g.mu);
  g.members = static_cast<int>(k.integer_or("members", g.members));
  return g;
}

}  // namespace

SimulateOptions simulate_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  ConfigSection root = c.root();
  SimulateOptions o;
  auto s = root.section("simulate");
  if (!s)
    throw InputError({path, {}, "simulate", "line", "key"}, "config_missing_key",
                     "a [simulate] table is required");
  o.seed = static_cast<std::uint64_t>(s->integer_or("seed", static_cast<std::int64_t>(o.seed)));
  o.n_calibrators = static_cast<int>(s->integer_or("n_calibrators", o.n_calibrators));
  o.n_targets = static_cast<int>(s->integer_or("n_targets", o.n_targets));
  o.n_lightcurve_stars =
      static_cast<int>(s->integer_or("n_lightcurve_stars", o.n_lightcurve_stars));
  o.pivot_log_period = s->number_or("pivot_log_period", o.pivot_log_period);
  o.first_overtone_fraction = s->number_or("first_overtone_fraction", o.first_overtone_fraction);
  o.outlier_fraction = s->number_or("outlier_fraction", o.outlier_fraction);
  o.far_fraction = s->number_or("far_fraction", o.far_fraction);
  o.max_distance_kpc = s->number_or("max_distance_kpc", o.max_distance_kpc);
  o.ebv_per_kpc = s->number_or("ebv_per_kpc", o.ebv_per_kpc);
  o.ebv_error = s->number_or("ebv_error", o.ebv_error);
  o.feh_mean = s->number_or("feh_mean", o.feh_mean);
  o.feh_sigma = s->number_or("feh_sigma", o.feh_sigma);
  o.feh_error = s->number_or("feh_error", o.feh_error);
  o.parallax_zero_point_mas = s->number_or("parallax_zero_point_mas", o.parallax_zero_point_mas);
  o.parallax_offset_mas = s->number_or("parallax_offset_mas", o.parallax_offset_mas);
  o.parallax_error_floor_mas = s->number_or("parallax_error_floor_mas", o.parallax_error_floor_mas);
  o.release2_error_factor = s->number_or("release2_error_factor", o.release2_error_factor);
  o.mag_error = s->number_or("mag_error", o.mag_error);
  std::string law = s->string_or("law", std::string(kExtinctionLawNames.name(o.law)));
  auto parsed = kExtinctionLawNames.parse(law);
  if (!parsed)
    s->fail("law", fmt::format("'{}' is not one of: {}", law, kExtinctionLawNames.choices()));
  o.law = *parsed;
  o.r_v = s->number_or("r_v", o.r_v);
  o.lightcurve_error = s->number_or("lightcurve_error", o.lightcurve_error);
  if (auto v = s->get_string_list("lightcurve_bands")) o.lightcurve_bands = *v;
  if (auto e = s->section("lightcurve_epochs")) {
    o.lightcurve_epochs.clear();
    for (const auto& k : e->keys()) o.lightcurve_epochs[k] = static_cast<int>(*e->get_integer(k));
  }
  o.observatory = s->string_or("observatory", o.observatory);
  o.calibrator_prefix = s->string_or("calibrator_prefix", o.calibrator_prefix);
  o.target_galaxy = s->string_or("target_galaxy", o.target_galaxy);
  o.target_prefix = s->string_or("target_prefix", o.target_prefix);
  o.target_mu = s->number_or("target_mu", o.target_mu);
  o.target_ebv = s->number_or("target_ebv", o.target_ebv);
  if (auto v = s->get_string_list("target_bands")) o.target_bands = *v;
  o.target_mag_error = s->number_or("target_mag_error", o.target_mag_error);
  o.bands_file = c.resolve_path(s->string_or("bands_file", "bands.toml"));
  o.output_folder = c.resolve_path(s->string_or("output_folder", o.output_folder));
  o.cluster_parallax_error_mas =
      s->number_or("cluster_parallax_error_mas", o.cluster_parallax_error_mas);
  o.field_group = s->string_or("field_group", o.field_group);
  for (const auto& k : root.section_list("cluster"))
    o.clusters.push_back(group_from<SimulatedCluster>(k));
  o.anchor_correlation = s->number_or("anchor_correlation", o.anchor_correlation);
  for (const auto& k : root.section_list("anchor")) {
    SimulatedAnchor a = group_from<SimulatedAnchor>(k);
    a.mu_err = k.number_or("mu_err", a.mu_err);
    a.ebv = k.number_or("ebv", a.ebv);
    o.anchors.push_back(a);
  }
  for (const auto& r : root.section_list("relation")) {
    TrueRelation t;
    t.band = r.require_string("band");
    t.independent_scatter = r.number_or("independent_scatter", t.independent_scatter);
    t.alpha = r.number_or("alpha", 0);
    t.beta = r.number_or("beta", 0);
    t.gamma = r.number_or("gamma", 0);
    t.scatter = r.number_or("scatter", 0);
    t.amplitude_ratio = r.number_or("amplitude_ratio", 1.0);
    o.relations.push_back(t);
  }
  c.check_unknown_keys();
  throw_if_invalid(o.check(), path, "simulate.");
  return o;
}

Simulation simulate(const SimulateOptions& o, const BandTable& bands) {
  throw_if_invalid(o.check(), "", "simulate.");
  Random stream(o.seed);
  Simulation sim;
  std::map<std::string, double> coefficient;  // R_band = A_band / E(B-V)
  for (const auto& r : o.relations) {
    const Band* b = bands.find(r.band);
    if (!b)
      throw InputError({}, "unknown_band",
                       fmt::format("simulated band '{}' is not in the band table", r.band));
    coefficient[r.band] = band_coefficient(*b, o.law, o.r_v);
  }

  // Calibrator catalog, in the invented observatory's own column names.
  StarTable& cat = sim.calibrators;
  cat.add_column("STAR", ColumnType::kText);
  cat.add_column("PERIOD", ColumnType::kReal, "d");
  cat.add_column("MODE", ColumnType::kText);
  cat.add_column("RA", ColumnType::kReal, "deg");
  cat.add_column("DEC", ColumnType::kReal, "deg");
  cat.add_column("ECL_LAT", ColumnType::kReal, "deg");
  cat.add_column("PLX", ColumnType::kReal, "mas");
  cat.add_column("PLX_ERR", ColumnType::kReal, "mas");
  cat.add_column("NU_EFF", ColumnType::kReal, "um-1");
  cat.add_column("ASTRO_N", ColumnType::kInteger);
  cat.add_column("RUWE", ColumnType::kReal);
  cat.add_column("EBV", ColumnType::kReal, "mag");
  cat.add_column("EBV_ERR", ColumnType::kReal, "mag");
  cat.add_column("FEH", ColumnType::kReal);
  cat.add_column("FEH_ERR", ColumnType::kReal);
  for (const auto& r : o.relations) {
    cat.add_column(r.band + "_MEAN", ColumnType::kReal, "mag");
    cat.add_column(r.band + "_ERR", ColumnType::kReal, "mag");
  }
  const bool grouped = !o.clusters.empty() || !o.anchors.empty();
  if (grouped) cat.add_column("GROUP", ColumnType::kText);
  StarTable& truth = sim.truth_stars;
  for (const char* c : {"id"}) truth.add_column(c, ColumnType::kText);
  for (const char* c : {"distance_pc", "mu_true", "ebv_true", "feh_true", "log_period_fundamental",
                        "parallax_true_mas"})
    truth.add_column(c, ColumnType::kReal);
  truth.add_column("outlier", ColumnType::kBoolean);
  for (const auto& r : o.relations) truth.add_column("M_" + r.band, ColumnType::kReal, "mag");

  StarTable& lc = sim.light_curves;
  lc.add_column("star", ColumnType::kText);
  lc.add_column("time_bjd_tdb", ColumnType::kReal, "d");
  lc.add_column("band", ColumnType::kText);
  lc.add_column("mag", ColumnType::kReal, "mag");
  lc.add_column("mag_err", ColumnType::kReal, "mag");

  // One calibrator: in the field, or at a cluster's or an anchor galaxy's place (`at`).
  struct Place {
    double d_kpc, ra, dec;
    std::string group;
    double ebv = -1;  // mean reddening there (< 0: the disk's, growing with distance)
  };
  auto add_calibrator = [&](Random& rng, const std::string& id, const Place* at,
                            bool with_light_curve) {
    bool overtone = rng.uniform() < o.first_overtone_fraction;
    bool far = rng.uniform() < o.far_fraction;
    bool outlier = rng.uniform() < o.outlier_fraction;
    // Fundamental(ized) log period: more short than long periods, as in the Galaxy.
    double logp_f = overtone ? rng.uniform(0.25, 0.85) : 0.35 + 1.35 * std::pow(rng.uniform(), 1.4);
    double period_f = std::pow(10.0, logp_f);
    double period = overtone ? first_overtone_period_for(period_f) : period_f;
    // Distance: uniform over a disk (p(d) ~ d) or, for the far share, 6-15 kpc.
    double d_kpc =
        far ? rng.uniform(6.0, 15.0) : o.max_distance_kpc * std::sqrt(rng.uniform(0.005, 1.0));
    if (at) d_kpc = at->d_kpc;
    double mu = distance_modulus_from_parsec(d_kpc * 1000.0);
    // Capped: stars behind more dust than this would be too faint for the astrometry.
    const double ebv_spread = std::exp(rng.normal(0.0, 0.35));
    double ebv = std::clamp(o.ebv_per_kpc * d_kpc * ebv_spread, 0.02, 1.8);
    if (at && at->ebv >= 0) ebv = std::clamp(at->ebv * ebv_spread, 0.005, 1.0);
    double ebv_err = o.ebv_error + 0.05 * ebv;
    double feh = rng.normal(o.feh_mean, o.feh_sigma);
    double blend = outlier ? -rng.uniform(0.6, 1.2) : 0.0;

    cat.column("STAR").push_text(id);
    if (grouped) cat.column("GROUP").push_text(at ? at->group : o.field_group);
    cat.column("PERIOD").push_real(rounded(period, 7));
    cat.column("MODE").push_text(overtone ? "1O" : "F");
    double ra = rng.uniform(0, 360), dec = std::asin(rng.uniform(-1, 1)) * 180 / std::numbers::pi;
    // A cluster spans minutes of arc, an anchor galaxy degrees.
    const double spread = at && at->ebv >= 0 ? 1.5 : 0.05;
    if (at) ra = at->ra + rng.normal(0, spread), dec = at->dec + rng.normal(0, spread);
    cat.column("RA").push_real(rounded(ra, 6));
    cat.column("DEC").push_real(rounded(dec, 6));
    cat.column("ECL_LAT").push_real(
        rounded(std::asin(rng.uniform(-1, 1)) * 180 / std::numbers::pi, 5));
    truth.column("id").push_text(id);
    truth.column("distance_pc").push_real(d_kpc * 1000);
    truth.column("mu_true").push_real(mu);
    truth.column("ebv_true").push_real(ebv);
    truth.column("feh_true").push_real(feh);
    truth.column("log_period_fundamental").push_real(logp_f);
    truth.column("parallax_true_mas").push_real(1.0 / d_kpc);
    truth.column("outlier").push_boolean(outlier);

    std::map<std::string, double> mean_mag;
    double strip = rng.normal();
    for (const auto& r : o.relations) {
      double m_abs = r.alpha + r.beta * (logp_f - o.pivot_log_period) + r.gamma * feh +
                     r.scatter * strip + rng.normal(0, r.independent_scatter);
      truth.column("M_" + r.band).push_real(m_abs);
      mean_mag[r.band] = m_abs + mu + coefficient[r.band] * ebv + blend;
      cat.column(r.band + "_MEAN")
          .push_real(rounded(mean_mag[r.band] + rng.normal(0, o.mag_error), 4));
      cat.column(r.band + "_ERR").push_real(o.mag_error);
    }
    double g = mean_mag.count("G") ? mean_mag["G"] : mean_mag.begin()->second;
    double plx_err = parallax_error_for(o, g);
    bool binary = rng.uniform() < 0.05;
    double ruwe = binary ? rng.uniform(1.5, 3.0) : rng.uniform(0.85, 1.25);
    double plx = 1.0 / d_kpc + o.parallax_zero_point_mas + o.parallax_offset_mas +
                 rng.normal(0, plx_err * (binary ? 3.0 : 1.0));
    cat.column("PLX").push_real(rounded(plx, 4));
    cat.column("PLX_ERR").push_real(rounded(plx_err, 4));
    // nu_eff from BP-RP (memory: Lindegren et al. 2021's colour relation, clamped to the
    // range the zero-point recipe accepts).
    double bprp =
        (mean_mag.count("BP") && mean_mag.count("RP")) ? mean_mag["BP"] - mean_mag["RP"] : 1.2;
    double nu_eff =
        std::clamp(1.76 - 1.61 / std::numbers::pi * std::atan(0.531 * bprp), 1.24, 1.72);
    cat.column("NU_EFF").push_real(rounded(nu_eff, 4));
    cat.column("ASTRO_N").push_integer(31);
    cat.column("RUWE").push_real(rounded(ruwe, 3));
    cat.column("EBV").push_real(rounded(std::max(0.0, ebv + rng.normal(0, ebv_err)), 3));
    cat.column("EBV_ERR").push_real(rounded(ebv_err, 3));
    cat.column("FEH").push_real(rounded(feh + rng.normal(0, o.feh_error), 2));
    cat.column("FEH_ERR").push_real(o.feh_error);

    if (with_light_curve) {
      LightCurveShape shape = draw_shape(rng, overtone);
      shape.epoch = 2460000.0 + rng.uniform(0, period);
      for (const auto& band : o.lightcurve_bands) {
        double scale = relation_for(o, band).amplitude_ratio;
        double offset = intensity_mean_offset(shape, scale);
        auto it = o.lightcurve_epochs.find(band);
        int n_epochs = it == o.lightcurve_epochs.end() ? 30 : it->second;
        std::vector<double> times;
        for (int k = 0; k < n_epochs; ++k) {
          // Four observing seasons of 160 nights, one a year.
          double season = static_cast<double>(rng.below(4));
          times.push_back(2460000.0 + 365.25 * season + rng.uniform(0, 160));
        }
        std::sort(times.begin(), times.end());
        for (double t : times) {
          double phi = std::fmod((t - shape.epoch) / period, 1.0);
          if (phi < 0) phi += 1.0;
          double m = mean_mag[band] - offset + shape_value(shape, scale, phi) +
                     rng.normal(0, o.lightcurve_error);
          lc.column("star").push_text(id);
          lc.column("time_bjd_tdb").push_real(rounded(t, 5));
          lc.column("band").push_text(band);
          lc.column("mag").push_real(rounded(m, 4));
          lc.column("mag_err").push_real(o.lightcurve_error);
        }
      }
    }
  };
  for (int i = 0; i < o.n_calibrators; ++i)
    add_calibrator(stream, fmt::format("{}{:04d}", o.calibrator_prefix, i + 1), nullptr,
                   i < o.n_lightcurve_stars);
  // Clusters come from a stream of their own, after the field: the field's draws stay as
  // they were without them.
  Random cluster_rng(o.seed ^ 0xC1C1A5E7B0A7D5E1ull);
  int member_number = o.n_calibrators;
  for (const SimulatedCluster& k : o.clusters) {
    const Place place{std::pow(10.0, 0.2 * k.mu - 2.0), cluster_rng.uniform(0, 360),
                      std::asin(cluster_rng.uniform(-1, 1)) * 180 / std::numbers::pi, k.name};
    // The cluster's mean parallax as published, with the zero point already applied.
    const double plx = 1.0 / place.d_kpc + o.parallax_offset_mas +
                       cluster_rng.normal(0, o.cluster_parallax_error_mas);
    sim.truth["clusters"].push_back({{"name", k.name},
                                     {"mu_true", k.mu},
                                     {"parallax_true_mas", 1.0 / place.d_kpc},
                                     {"parallax_mas", rounded(plx, 4)},
                                     {"parallax_err_mas", o.cluster_parallax_error_mas}});
    for (int m = 0; m < k.members; ++m)
      add_calibrator(cluster_rng, fmt::format("{}{:04d}", o.calibrator_prefix, ++member_number),
                     &place, false);
  }
  // Anchor galaxies, from a stream of their own after the clusters. Published moduli: the
  // truth plus sigma_i (sqrt(rho) g + sqrt(1 - rho) n_i), one g shared, so that
  // cov_ij = rho sigma_i sigma_j.
  Random anchor_rng(o.seed ^ 0xA7C4D2B9E5F31A6Bull);
  const double shared = anchor_rng.normal();
  nlohmann::json covariance = nlohmann::json::array();
  for (const SimulatedAnchor& a : o.anchors) {
    const double mu_published =
        a.mu + a.mu_err * (std::sqrt(o.anchor_correlation) * shared +
                           std::sqrt(1.0 - o.anchor_correlation) * anchor_rng.normal());
    sim.truth["anchors"].push_back({{"name", a.name},
                                    {"mu_true", a.mu},
                                    {"mu", rounded(mu_published, 4)},
                                    {"mu_err", a.mu_err}});
    nlohmann::json row = nlohmann::json::array();
    for (const SimulatedAnchor& b : o.anchors)
      row.push_back(a.name == b.name ? a.mu_err * a.mu_err
                                     : o.anchor_correlation * a.mu_err * b.mu_err);
    covariance.push_back(row);
    Place place{std::pow(10.0, 0.2 * a.mu - 2.0), anchor_rng.uniform(0, 360),
                std::asin(anchor_rng.uniform(-1, 1)) * 180 / std::numbers::pi, a.name, a.ebv};
    for (int m = 0; m < a.members; ++m)
      add_calibrator(anchor_rng, fmt::format("{}{:04d}", o.calibrator_prefix, ++member_number),
                     &place, false);
  }
  if (!o.anchors.empty()) sim.truth["anchor_covariance"] = covariance;

  // A later data release: the same stars, new parallaxes with smaller errors, drawn from a
  // stream of their own so the first release's draw stays as it was.
  if (o.release2_error_factor > 0) {
    sim.calibrators_release2 = cat;
    Random r2(o.seed ^ 0x5EC0DD47A5E1EA5Eull);
    for (std::size_t i = 0; i < cat.rows(); ++i) {
      double err = cat.column("PLX_ERR").real[i] * o.release2_error_factor;
      double noise = err * (cat.column("RUWE").real[i] > 1.4 ? 3.0 : 1.0);
      sim.calibrators_release2.column("PLX").real[i] =
          rounded(truth.column("parallax_true_mas").real[i] + o.parallax_zero_point_mas +
                      o.parallax_offset_mas + r2.normal(0, noise),
                  4);
      sim.calibrators_release2.column("PLX_ERR").real[i] = rounded(err, 4);
    }
    sim.calibrators_release2.set_keyword("RGRELEAS", static_cast<std::int64_t>(2),
                                         "simulated data release");
  }

  // Targets in the invented distant galaxy.
  StarTable& tg = sim.targets;
  tg.add_column("id", ColumnType::kText);
  tg.add_column("host", ColumnType::kText);
  tg.add_column("period_d", ColumnType::kReal, "d");
  tg.add_column("ebv", ColumnType::kReal, "mag");
  tg.add_column("ebv_err", ColumnType::kReal, "mag");
  tg.add_column("feh", ColumnType::kReal);
  for (const auto& b : o.target_bands) {
    tg.add_column("mag_" + b, ColumnType::kReal, "mag");
    tg.add_column("mag_err_" + b, ColumnType::kReal, "mag");
  }
  double host_feh = o.feh_mean - 0.1;
  for (int i = 0; i < o.n_targets; ++i) {
    double logp = stream.uniform(1.0, 1.9);
    double ebv = o.target_ebv + std::abs(stream.normal(0, 0.03));
    double strip = stream.normal();
    tg.column("id").push_text(fmt::format("{}{:04d}", o.target_prefix, i + 1));
    tg.column("host").push_text(o.target_galaxy);
    tg.column("period_d").push_real(rounded(std::pow(10.0, logp), 5));
    tg.column("ebv").push_real(rounded(ebv + stream.normal(0, 0.02), 3));
    tg.column("ebv_err").push_real(0.02);
    tg.column("feh").push_real(host_feh);
    for (const auto& b : o.target_bands) {
      const TrueRelation& r = relation_for(o, b);
      double m = r.alpha + r.beta * (logp - o.pivot_log_period) + r.gamma * host_feh +
                 r.scatter * strip + stream.normal(0, r.independent_scatter) + o.target_mu +
                 coefficient[b] * ebv;
      double err = o.target_mag_error * (1.0 + 0.5 * stream.uniform());
      tg.column("mag_" + b).push_real(rounded(m + stream.normal(0, err), 3));
      tg.column("mag_err_" + b).push_real(rounded(err, 3));
    }
  }

  // The truth, with each Wesenheit magnitude's relation implied by the band relations.
  nlohmann::json& t = sim.truth;
  t["seed"] = o.seed;
  t["software_version"] = software_version();
  t["observatory"] = o.observatory;
  t["target_galaxy"] = o.target_galaxy;
  t["target_mu"] = o.target_mu;
  t["pivot_log_period"] = o.pivot_log_period;
  t["law"] = std::string(kExtinctionLawNames.name(o.law));
  t["r_v"] = o.r_v;
  t["parallax_zero_point_mas"] = o.parallax_zero_point_mas;
  t["parallax_offset_mas"] = o.parallax_offset_mas;
  t["note"] = "observed parallax = 1/d + parallax_zero_point_mas + parallax_offset_mas + noise";
  for (const auto& r : o.relations)
    t["relations"][r.band] = {{"alpha", r.alpha},
                              {"beta", r.beta},
                              {"gamma", r.gamma},
                              {"scatter", std::hypot(r.scatter, r.independent_scatter)},
                              {"a_over_ebv", coefficient[r.band]}};
  for (const auto& w : bands.wesenheits()) {
    if (!coefficient.count(w.x) || !coefficient.count(w.y) || !coefficient.count(w.z)) continue;
    double rw = coefficient[w.x] / (coefficient[w.y] - coefficient[w.z]);
    const TrueRelation &x = relation_for(o, w.x), &y = relation_for(o, w.y),
                       &z = relation_for(o, w.z);
    t["wesenheit"][w.name] = {
        {"r_reddening_free", rw},
        {"alpha", x.alpha - rw * (y.alpha - z.alpha)},
        {"beta", x.beta - rw * (y.beta - z.beta)},
        {"gamma", x.gamma - rw * (y.gamma - z.gamma)},
        {"scatter",
         std::sqrt(std::pow(x.scatter - rw * (y.scatter - z.scatter), 2) +
                   std::pow(x.independent_scatter, 2) +
                   rw * rw *
                       (std::pow(y.independent_scatter, 2) + std::pow(z.independent_scatter, 2)))}};
  }
  cat.set_keyword("OBSERVAT", o.observatory, "invented observatory (simulated data)");
  cat.set_keyword("RGSIMSD", static_cast<std::int64_t>(o.seed), "rungcal-simulate seed");
  return sim;
}

void write_simulation(const Simulation& sim, const std::string& folder) {
  std::filesystem::create_directories(folder);
  write_fits_tables(folder + "/calibrators.fits", {{"STARS", &sim.calibrators}});
  if (sim.calibrators_release2.rows() > 0)
    write_fits_tables(folder + "/calibrators_release2.fits",
                      {{"STARS", &sim.calibrators_release2}});
  write_csv_table(sim.light_curves, folder + "/lightcurves.csv");
  write_csv_table(sim.targets, folder + "/targets.csv");
  write_csv_table(sim.truth_stars, folder + "/truth_stars.csv");
  write_file_atomically(folder + "/truth.json", sim.truth.dump(2) + "\n");
}

}  // namespace rungcal
