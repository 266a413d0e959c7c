// SPDX-License-Identifier: MIT
#include "rungcal/simulate/mock_catalog.hpp"

#include <algorithm>
#include <cmath>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/random.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/table/catalog_schema.hpp"

namespace rungcal {
namespace {

double draw_distance_kpc(MockDistances kind, Random& rng, const std::vector<double>& clumps) {
  switch (kind) {
    case MockDistances::kDisk:
      for (;;) {  // Gamma(2, 2.5 kpc) is the sum of two exponentials; keep 0.3-8 kpc
        const double d = -2.5 * (std::log(1.0 - rng.uniform()) + std::log(1.0 - rng.uniform()));
        if (d > 0.3 && d < 8.0) return d;
      }
    case MockDistances::kFlatModulus:
      return std::pow(10.0, 0.2 * rng.uniform(8.5, 13.5) - 2.0);
    case MockDistances::kClumpy: {
      const double centre = clumps[rng.below(clumps.size())];
      return centre * std::max(0.5, 1.0 + rng.normal(0.0, 0.05));
    }
  }
  return 1.0;
}

// The clusters' own stream: seeded apart from the field stars' so adding clusters leaves
// those unchanged.
Random cluster_stream(const MockScenario& s) { return Random(s.seed ^ 0x5C1A57E2D0C0FFEEull); }

// The cluster-level draws come first in that stream, so mock_clusters() need not draw members.
std::vector<MockCluster> draw_clusters(const MockScenario& s, Random& rng) {
  std::vector<MockCluster> out;
  for (int k = 0; k < s.clusters; ++k) {
    MockCluster c;
    c.group = fmt::format("MOCK-CL{:03d}", k);
    c.mu = rng.uniform(9.5, 12.0);
    c.parallax_err_mas = s.cluster_parallax_error_mas;
    c.parallax_mas = std::pow(10.0, -0.2 * (c.mu - 10.0)) + s.parallax_offset_mas +
                     rng.normal(0.0, c.parallax_err_mas);
    out.push_back(c);
  }
  return out;
}

// The anchors' own stream: seeded apart from the field stars' and the clusters'.
Random anchor_stream(const MockScenario& s) { return Random(s.seed ^ 0xA2C4085A11CE5EEDull); }

// Equicorrelated errors: e_k = sigma (sqrt(rho) z_0 + sqrt(1 - rho) z_k) has variance sigma^2
// and correlation rho between any two. The galaxy-level draws come first in the stream.
std::vector<MockAnchor> draw_anchors(const MockScenario& s, Random& rng) {
  std::vector<MockAnchor> out;
  if (s.anchors == 0) return out;
  const double shared = rng.normal(), rho = s.anchor_correlation;
  for (int k = 0; k < s.anchors; ++k) {
    MockAnchor a;
    a.group = fmt::format("MOCK-AN{:03d}", k);
    a.mu_true = 18.5 + 0.45 * k;
    a.mu_err = s.anchor_mu_error;
    a.mu_published = a.mu_true + s.anchor_mu_error *
                                     (std::sqrt(rho) * shared + std::sqrt(1 - rho) * rng.normal());
    out.push_back(a);
  }
  return out;
}

// A blend's brightening b in band X carried to a band where the companion's flux ratio is
// `colour` times X's (Pogson: b = 2.5 log10(1 + q)).
double coloured_brightening(double b, double colour) {
  if (b <= 0 || colour == 1.0) return b;
  const double q = std::pow(10.0, 0.4 * b) - 1.0;
  return 2.5 * std::log10(1.0 + colour * q);
}

// A star's draws, one stream per effect, each seeded from the star's key and the effect:
// switching one contamination on or off (or changing its size) leaves every other draw of every
// star as it was, so study rows that differ in one contamination pair mock by mock (common
// random numbers), and a paired difference shows that contamination's effect alone.
enum class StarEffect : int {
  kDistance,
  kPulsation,
  kMetallicity,
  kScatter,
  kPhotometry,
  kReddening,
  kBlend,
  kAstrometry,
  kOutlier,
  kFurtherBands,
  kCount
};

class StarDraws {
 public:
  explicit StarDraws(std::uint64_t key) {
    for (int k = 0; k < static_cast<int>(StarEffect::kCount); ++k)
      streams_.emplace_back(
          splitmix64(key + 0x9E3779B97F4A7C15ull * static_cast<std::uint64_t>(k + 1)));
  }
  Random& stream(StarEffect e) { return streams_[static_cast<std::size_t>(e)]; }

 private:
  // SplitMix64's output function (Steele, Lea & Flood 2014): nearby keys give unrelated seeds.
  static std::uint64_t splitmix64(std::uint64_t z) {
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
  }
  std::vector<Random> streams_;
};

}  // namespace

std::vector<MockCluster> mock_clusters(const MockScenario& s) {
  Random rng = cluster_stream(s);
  return draw_clusters(s, rng);
}

std::vector<MockAnchor> mock_anchors(const MockScenario& s) {
  Random rng = anchor_stream(s);
  return draw_anchors(s, rng);
}

Eigen::MatrixXd mock_anchor_covariance(const MockScenario& s) {
  const double var = s.anchor_mu_error * s.anchor_mu_error;
  Eigen::MatrixXd c = Eigen::MatrixXd::Constant(s.anchors, s.anchors, s.anchor_correlation * var);
  c.diagonal().setConstant(var);
  return c;
}

namespace {

// The fit's quartic outlier law, p(e) = (e^4 / 3 s^4) N(e | 0, s^2) with s = F sigma_pi: |e| / s
// follows the chi distribution of five degrees of freedom, the length of a 5-d standard normal
// vector, and the sign is even.
MockOutlierShift quartic_component_draw(double parallax_err_mas, Random& rng) {
  double chi2 = 0;
  for (int k = 0; k < 5; ++k) {
    const double z = rng.normal();
    chi2 += z * z;
  }
  const double sign = rng.uniform() < 0.5 ? -1.0 : 1.0;
  const double scale = kMockQuarticOutlierFactor * parallax_err_mas;
  return {sign * std::sqrt(chi2) * scale, 0.0, true};
}

}  // namespace

MockOutlierShift mock_outlier_shift(MockOutlierLaw law, double parallax_err_mas, Random& rng) {
  if (law == MockOutlierLaw::kShifted)
    return {(rng.uniform() < 0.5 ? -1.0 : 1.0) * rng.uniform(5.0, 20.0) * parallax_err_mas, 0.0};
  if (law == MockOutlierLaw::kUnderestimatedError) {
    // x F in all: the member's own N(0, sigma^2) plus N(0, (F^2 - 1) sigma^2).
    const double factor = rng.uniform(5.0, 20.0);
    return {rng.normal(0.0, std::sqrt(factor * factor - 1.0) * parallax_err_mas), 0.0};
  }
  if (law == MockOutlierLaw::kQuarticComponent)
    return quartic_component_draw(parallax_err_mas, rng);
  // x10 the error in all: the member's own N(0, sigma^2) plus N(0, 99 sigma^2).
  const double parallax = rng.normal(0.0, std::sqrt(99.0) * parallax_err_mas);
  return {parallax, rng.normal(0.0, 1.0)};
}

double mock_blend_brightening(MockBlendLaw law, Random& rng) {
  switch (law) {
    case MockBlendLaw::kModerate:
      return rng.uniform(0.3, 1.0);
    case MockBlendLaw::kFaintCompanions:
      return 2.5 * std::log10(1.0 + rng.uniform(0.0, 1.5));
    case MockBlendLaw::kBrightCompanions:
      return 2.5 * std::log10(1.0 + rng.uniform(0.5, 4.0));
    case MockBlendLaw::kFitComponent: {
      // Gamma(2, theta) is the sum of two Exp(theta): theta = 0.25 for a mean of 0.5 mag.
      const double u1 = 1.0 - rng.uniform(), u2 = 1.0 - rng.uniform();
      return 0.3 - 0.25 * std::log(u1 * u2);
    }
  }
  return 0.0;
}

std::string MockScenario::check() const {
  if (stars < 3) return "stars: at least 3";
  for (double f : {blend_fraction, parallax_outlier_fraction, overtone_fraction, far_fraction})
    if (!(f >= 0 && f < 1)) return "fractions: each in [0, 1)";
  if (!(scatter_correlation >= 0 && scatter_correlation < 1))
    return "scatter_correlation: in [0, 1)";
  for (const auto& r : more_relations)
    if (r.name.empty() || r.name == "X" || !(r.sigma_int >= 0) || !(r.companion_colour > 0))
      return "more_relations: a name other than X, sigma_int >= 0, companion_colour > 0";
  if (clusters < 0 || clusters > 1000 || cluster_members < 1 || cluster_members > 1000)
    return "clusters: 0 to 1000 clusters of 1 to 1000 members";
  if (!(cluster_parallax_error_mas > 0)) return "cluster_parallax_error_mas: must be positive";
  if (anchors < 0 || anchors > 20 || anchor_members < 1 || anchor_members > 10000)
    return "anchors: 0 to 20 galaxies of 1 to 10000 members";
  if (!(anchor_mu_error > 0)) return "anchor_mu_error: must be positive";
  if (!(anchor_correlation >= 0 && anchor_correlation < 1)) return "anchor_correlation: in [0, 1)";
  if (!(sigma_int >= 0 && feh_error >= 0 && ebv_error >= 0 && mag_error > 0 && feh_spread > 0 &&
        parallax_error_scale > 0))
    return "errors: sigma_int, feh_error, ebv_error >= 0; mag_error, feh_spread, "
           "parallax_error_scale > 0";
  return "";
}

nlohmann::json MockScenario::truth() const {
  nlohmann::json t = relation_truth();
  // The anchors' true moduli, named as the fit names them (single and joint alike).
  for (const MockAnchor& a : mock_anchors(*this)) t["mu_" + a.group] = a.mu_true;
  return t;
}

nlohmann::json MockScenario::relation_truth() const {
  if (!more_relations.empty()) {
    nlohmann::json t = {{"parallax_offset_mas", parallax_offset_mas},
                        {"feh_mean", feh_mean},
                        {"feh_spread", feh_spread},
                        {"scatter_correlation", scatter_correlation}};
    auto add = [&](const std::string& name, double a, double b, double g, double s) {
      t["alpha_" + name] = a, t["beta_" + name] = b, t["gamma_" + name] = g,
                   t["sigma_int_" + name] = s;
    };
    add("X", alpha, beta, gamma, sigma_int);
    for (const auto& r : more_relations) {
      add(r.name, r.alpha, r.beta, r.gamma, r.sigma_int);
      // A coloured companion's brightening ratio depends on the companion's light (Pogson per
      // band): no single true value, so only grey blends have one.
      if (r.companion_colour == 1.0) t["blend_ratio_" + r.name] = 1.0;
    }
    return t;
  }
  return {{"alpha", alpha},
          {"beta", beta},
          {"gamma", gamma},
          {"sigma_int", sigma_int},
          {"parallax_offset_mas", parallax_offset_mas},
          {"feh_mean", feh_mean},
          {"feh_spread", feh_spread}};
}

StarTable mock_calibrator_catalog(const MockScenario& s) {
  Random field_rng(s.seed);
  std::vector<double> clumps;
  for (int k = 0; k < 8; ++k)
    clumps.push_back(std::pow(10.0, 0.2 * field_rng.uniform(9.0, 13.0) - 2.0));
  StarTable t;
  for (const char* c : {col::kId, col::kMode, col::kClass}) t.add_column(c, ColumnType::kText);
  const std::string mag_x = dereddened_magnitude_column("X"),
                    mag_err_x = dereddened_magnitude_error_column("X");
  for (const std::string& c :
       {std::string(col::kLogPeriod), mag_x, mag_err_x, std::string(col::kParallax),
        std::string(col::kParallaxErr), std::string(col::kFeh), std::string(col::kFehErr)})
    t.add_column(c, ColumnType::kReal);
  for (const auto& r : s.more_relations)
    for (const std::string& c :
         {dereddened_magnitude_column(r.name), dereddened_magnitude_error_column(r.name)})
      t.add_column(c, ColumnType::kReal);
  // The joint fit correlates the bands' E(B-V) errors through it.
  if (!s.more_relations.empty()) t.add_column(col::kEbvErr, ColumnType::kReal);
  const bool groups = s.clusters > 0 || s.anchors > 0;
  if (groups) t.add_column(col::kGroup, ColumnType::kText);
  // One star at cluster_kpc (> 0) or drawn from the scenario's distances. Each effect draws
  // from the star's own stream for it, every draw made whether the effect is on or off.
  auto add_star = [&](Random& rng, const std::string& id, const std::string& group,
                      double cluster_kpc) {
    StarDraws draw(rng.next());
    Random& where = draw.stream(StarEffect::kDistance);
    const bool far = where.uniform() < s.far_fraction;
    const double far_kpc = where.uniform(8.0, 15.0);
    const double d = cluster_kpc > 0 ? cluster_kpc
                     : far           ? far_kpc
                                     : draw_distance_kpc(s.distances, where, clumps);
    const double mu = distance_modulus_from_parsec(d * 1e3);
    Random& pulsation = draw.stream(StarEffect::kPulsation);
    const bool overtone = pulsation.uniform() < s.overtone_fraction;
    const double logp_overtone = pulsation.uniform(0.1, 0.7),
                 logp_fundamental = pulsation.uniform(0.4, 1.6);
    const double logp = overtone ? logp_overtone : logp_fundamental;
    const std::string mode = overtone ? "first_overtone" : "fundamental";
    const double logp_f = fundamentalized_log_period("classical_cepheid", mode, logp);
    Random& metals = draw.stream(StarEffect::kMetallicity);
    const double feh = metals.normal(s.feh_mean, s.feh_spread),
                 feh_measured = feh + s.feh_error * metals.normal();
    const double u_x = draw.stream(StarEffect::kScatter).normal();
    const double abs_mag =
        s.alpha + s.beta * (logp_f - s.pivot_log_period) + s.gamma * feh + s.sigma_int * u_x;
    Random& photometry = draw.stream(StarEffect::kPhotometry);
    double m0 = abs_mag + mu + photometry.normal(0.0, s.mag_error);
    const double ebv_off = s.ebv_error * draw.stream(StarEffect::kReddening).normal();
    m0 += s.extinction_per_ebv * ebv_off;
    Random& blending = draw.stream(StarEffect::kBlend);
    const bool blended = blending.uniform() < s.blend_fraction;
    const double blend_mag = mock_blend_brightening(s.blend_law, blending);
    const double brightening = blended ? blend_mag : 0.0;
    m0 -= brightening;
    // Astrometric errors follow the star's observed brightness, as a survey's do (the fit
    // conditions on the observed magnitude, so the errors carry no hidden distance).
    const double plx_err =
        s.parallax_error_scale * (0.012 + 0.06 * std::pow(10.0, 0.4 * (m0 - 15.0)));
    const double plx_expected = 1.0 / d + s.parallax_offset_mas;
    const double plx_measured =
        plx_expected + plx_err * draw.stream(StarEffect::kAstrometry).normal();
    Random& gross = draw.stream(StarEffect::kOutlier);
    const bool is_outlier = gross.uniform() < s.parallax_outlier_fraction;
    const MockOutlierShift shift = mock_outlier_shift(s.outlier_law, plx_err, gross);
    const MockOutlierShift outlier = is_outlier ? shift : MockOutlierShift{};
    const double plx =
        (outlier.replaces_member_noise ? plx_expected : plx_measured) + outlier.parallax_mas;
    m0 += outlier.magnitude;
    const double m_err = std::hypot(s.mag_error, s.extinction_per_ebv * s.ebv_error);
    t.column(col::kId).push_text(id);
    if (groups) t.column(col::kGroup).push_text(group);
    t.column(col::kMode).push_text(mode);
    t.column(col::kClass).push_text("classical_cepheid");
    t.column(col::kLogPeriod).push_real(logp);
    t.column(mag_x).push_real(m0);
    t.column(mag_err_x).push_real(m_err);
    t.column(col::kParallax).push_real(plx);
    t.column(col::kParallaxErr).push_real(plx_err);
    t.column(col::kFeh).push_real(feh_measured);
    t.column(col::kFehErr).push_real(s.feh_error);
    if (s.more_relations.empty()) return;
    t.column(col::kEbvErr).push_real(s.ebv_error);
    // Equicorrelated scatter: u_k = rho u_X + sqrt(rho - rho^2) v + sqrt(1 - rho) w_k has unit
    // variance and correlation rho with u_X and with every other u_l.
    const double rho = s.scatter_correlation;
    Random& bands = draw.stream(StarEffect::kFurtherBands);
    const double shared = bands.normal();
    for (const auto& r : s.more_relations) {
      const double u =
          rho * u_x + std::sqrt(rho - rho * rho) * shared + std::sqrt(1.0 - rho) * bands.normal();
      const double m = r.alpha + r.beta * (logp_f - s.pivot_log_period) + r.gamma * feh +
                       r.sigma_int * u + mu + outlier.magnitude +
                       photometry.normal(0.0, s.mag_error) + r.extinction_per_ebv * ebv_off -
                       coloured_brightening(brightening, r.companion_colour);
      t.column(dereddened_magnitude_column(r.name)).push_real(m);
      t.column(dereddened_magnitude_error_column(r.name))
          .push_real(std::hypot(s.mag_error, r.extinction_per_ebv * s.ebv_error));
    }
  };
  for (int i = 0; i < s.stars; ++i) add_star(field_rng, fmt::format("MOCK-{:05d}", i), "", 0.0);
  Random cluster_rng = cluster_stream(s);
  for (const MockCluster& c : draw_clusters(s, cluster_rng))
    for (int k = 0; k < s.cluster_members; ++k)
      add_star(cluster_rng, fmt::format("{}-{:03d}", c.group, k), c.group,
               std::pow(10.0, 0.2 * c.mu - 2.0));
  Random anchor_rng = anchor_stream(s);
  for (const MockAnchor& a : draw_anchors(s, anchor_rng))
    for (int k = 0; k < s.anchor_members; ++k)
      add_star(anchor_rng, fmt::format("{}-{:04d}", a.group, k), a.group,
               std::pow(10.0, 0.2 * a.mu_true - 2.0));
  return t;
}

StarTable mock_coefficients(const MockScenario& s) {
  StarTable t;
  namespace C = coefficient_col;
  t.add_column(C::kName, ColumnType::kText);
  t.add_column(C::kAOverEbv, ColumnType::kReal);
  t.column(C::kName).push_text("X");
  t.column(C::kAOverEbv).push_real(s.extinction_per_ebv);
  for (const auto& r : s.more_relations) {
    t.column(C::kName).push_text(r.name);
    t.column(C::kAOverEbv).push_real(r.extinction_per_ebv);
  }
  return t;
}

}  // namespace rungcal
