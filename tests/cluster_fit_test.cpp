// SPDX-License-Identifier: MIT
// Cluster calibrators (FitOptions::clusters, lib/rungcal/plfit): the hierarchical likelihood
// of a cluster-only sample against scipy.stats (Debian python3-scipy), the options' rules,
// member rejection, the bootstrap by cluster, and recovery of mock clusters with known truth.
#include <gtest/gtest.h>

#include <cmath>
#include <iomanip>
#include <sstream>

#include "mock_samples.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/plfit/hierarchical.hpp"
#include "rungcal/simulate/mock_catalog.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// Four members of one cluster at mu near 11 (invented values): magnitudes, log P - 1, own
// parallaxes (the third has none), and the cluster's parallax.
struct Member {
  double x, m0, plx;
};
const Member kMembers[] = {
    {-0.2, 5.81, 0.160}, {0.1, 4.93, 0.151}, {0.3, 4.22, NAN}, {0.5, 3.50, 0.205}};
constexpr double kMagErr = 0.03, kPlxErr = 0.02, kClusterPlx = 0.1575, kClusterErr = 0.004;

struct ClusterCase {
  FitData data;
  ParameterLayout layout;
  FitSettings settings;
  Eigen::VectorXd theta;
};

// The cluster-only sample: outliers as the mixture's second component (f = 0.1, 0.5 mag
// brighter, 0.8 mag wider, parallax errors x10), no blends, no [Fe/H] term.
ClusterCase cluster_case() {
  ClusterCase c;
  for (const Member& m : kMembers) {
    FitData::Common& a = c.data.anchor;
    const Eigen::Index n = a.x.size() + 1;
    for (Eigen::ArrayXd* v :
         {&a.x, &a.xl, &a.feh, &a.m0, &a.var_m, &c.data.anchor_plx, &c.data.anchor_var_plx})
      v->conservativeResize(n);
    a.x[n - 1] = m.x, a.xl[n - 1] = 0, a.feh[n - 1] = 0, a.m0[n - 1] = m.m0,
            a.var_m[n - 1] = kMagErr * kMagErr;
    c.data.anchor_plx[n - 1] = std::isnan(m.plx) ? 0.0 : m.plx;
    c.data.anchor_var_plx[n - 1] = std::isnan(m.plx) ? 0.0 : kPlxErr * kPlxErr;
    a.row.push_back(static_cast<std::size_t>(n - 1));
    c.data.group.push_back(0);
  }
  c.data.group_plx = {{kClusterPlx, kClusterErr * kClusterErr, 1.0}};
  ModelTerms terms{1.0, false, 0, false, 1, true, false, 0, false};
  terms.n_clusters = 1;
  c.layout = ParameterLayout::for_terms(terms, {"CL"});
  const ParameterLayout& L = c.layout;
  c.settings.space = FitSpace::kHierarchical;
  c.settings.terms = terms;
  c.settings.hierarchical.blends = BlendComponent::kNone;
  c.settings.params.assign(static_cast<std::size_t>(L.size), ParamSpec{});
  c.theta = Eigen::VectorXd::Zero(L.size);
  c.theta[L.alpha] = -5.9, c.theta[L.beta] = -3.1, c.theta[L.offset] = -0.012,
  c.theta[L.sigma] = 0.07;
  c.theta[L.anchor0] = 10.95, c.theta[L.outlier] = 0.1, c.theta[L.outlier_shift] = 0.5;
  c.theta[L.outlier_width] = 0.8, c.theta[L.outlier_factor] = 10.0;
  c.theta[L.distance_scale] = 1, c.theta[L.distance_power] = 2, c.theta[L.distance_exponent] = 1;
  for (int j : {L.outlier_shift, L.outlier_width, L.outlier_factor, L.distance_scale,
                L.distance_power, L.distance_exponent})
    c.settings.params[static_cast<std::size_t>(j)] =
        ParamSpec{ParamMode::kFixed, c.theta[j], 0, true};
  return c;
}

// -ln L written out with scipy.stats.norm (Debian python3-scipy): per member,
// logaddexp(ln(1 - f) + ln N(m | mu + M, V) + ln N(pi | p + off, s^2),
//           ln f + ln N(m | mu + M - shift, V + w^2) + ln[(e^4 / 3 S^2) N(e | 0, S)]),
// S = 100 s^2, with e = pi - p - off (the outlier's quartic parallax law, the default),
// p = 10^(-0.2 (mu - 10)), V = sigma_m^2 + sigma_int^2, plus the cluster's
// ln N(pi_c | p + off, s_c^2).
TEST(ClusterLikelihood, ValueEqualsScipyOnAClusterOnlySample) {
  const ClusterCase c = cluster_case();
  const ParameterLayout& L = c.layout;
  const double ours = hierarchical_value(c.data, c.settings, L, c.theta).neg_log_likelihood;
  std::ostringstream py;
  py << std::setprecision(17);
  py << "import numpy as np\nfrom scipy.stats import norm\n";
  py << "alpha, beta, off, sig, mu, f, shift, w = " << c.theta[L.alpha] << ", " << c.theta[L.beta]
     << ", " << c.theta[L.offset] << ", " << c.theta[L.sigma] << ", " << c.theta[L.anchor0] << ", "
     << c.theta[L.outlier] << ", " << c.theta[L.outlier_shift] << ", " << c.theta[L.outlier_width]
     << "\n";
  py << "members = [";
  for (const Member& m : kMembers)
    py << "(" << m.x << ", " << m.m0 << ", " << (std::isnan(m.plx) ? "None" : std::to_string(m.plx))
       << "),";
  py << "]\n";
  py << "em, ep, pc, ec = " << kMagErr << ", " << kPlxErr << ", " << kClusterPlx << ", "
     << kClusterErr << "\n";
  py << R"(p = 10 ** (-0.2 * (mu - 10))
V = em**2 + sig**2
total = norm.logpdf(pc, p + off, ec)
for x, m, plx in members:
    M = alpha + beta * x
    a = np.log(1 - f) + norm.logpdf(m, mu + M, np.sqrt(V))
    b = np.log(f) + norm.logpdf(m, mu + M - shift, np.sqrt(V + w**2))
    if plx is not None:
        a += norm.logpdf(plx, p + off, ep)
        e = plx - p - off
        b += norm.logpdf(e, 0, 10 * ep) + np.log(e**4 / (3 * (100 * ep * ep) ** 2))
    total += np.logaddexp(a, b)
print(repr(-total))
)";
  const test::CommandResult run = test::run_python(py.str());
  ASSERT_EQ(run.exit_code, 0) << run.output;
  const std::vector<double> scipy = test::parse_numbers(run.output);
  ASSERT_EQ(scipy.size(), 1u) << run.output;
  EXPECT_NEAR(ours, scipy[0], 1e-9 * std::max(1.0, std::abs(scipy[0])));
}

// A mock catalog with clusters (rungcal's own mocks, known truth) and the fit options that
// go with it: each cluster by its parallax.
struct ClusterMock {
  MockScenario scenario;
  StarTable catalog;
  FitOptions options = test::mock_fit_options();
  std::vector<MockCluster> clusters;
};

ClusterMock cluster_mock(std::uint64_t seed) {
  ClusterMock m;
  m.scenario.seed = seed;
  m.scenario.stars = 150;
  m.scenario.clusters = 6;
  m.scenario.cluster_members = 5;
  m.catalog = mock_calibrator_catalog(m.scenario);
  m.clusters = mock_clusters(m.scenario);
  for (const MockCluster& k : m.clusters) {
    ClusterOptions o;
    o.group = k.group;
    o.parallax_mas = k.parallax_mas;
    o.parallax_err_mas = k.parallax_err_mas;
    m.options.clusters.push_back(o);
  }
  return m;
}

const StarOutcome* outcome(const RelationResult& rr, const std::string& id) {
  for (const StarOutcome& s : rr.stars)
    if (s.id == id) return &s;
  return nullptr;
}

// The cluster moduli come out within 3 of their errors of the truth, members use their own
// parallaxes, a planted non-member is refused with its reason, and the result file lists
// every member.
TEST(ClusterFit, RecoversMockClustersAndRefusesAPlantedNonMember) {
  ClusterMock m = cluster_mock(11);
  // The first member of the first cluster gets a field star's parallax: 0.1 mas off, many sigma.
  const std::string planted = m.clusters[0].group + "-000";
  for (std::size_t r = 0; r < m.catalog.rows(); ++r)
    if (m.catalog.column(col::kId).text[r] == planted)
      m.catalog.column(col::kParallax).real[r] = m.clusters[0].parallax_mas + 0.1;
  const FitResult result = run_fit(m.options, m.catalog, nullptr);
  const RelationResult& rr = result.relations[0];
  ASSERT_TRUE(rr.solution.usable);
  ASSERT_TRUE(rr.covariance_ok);
  for (const MockCluster& k : m.clusters) {
    const double err = rr.error("mu_" + k.group);
    EXPECT_GT(err, 0.0);
    EXPECT_LT(err, 0.1);
    EXPECT_NEAR(rr.parameter("mu_" + k.group), k.mu, 3.0 * err) << k.group;
  }
  const StarOutcome* bad = outcome(rr, planted);
  ASSERT_NE(bad, nullptr);
  EXPECT_FALSE(bad->used);
  EXPECT_NE(bad->reason.find("not a member of cluster " + m.clusters[0].group), std::string::npos)
      << bad->reason;
  const StarOutcome* good = outcome(rr, m.clusters[0].group + "-001");
  ASSERT_NE(good, nullptr);
  EXPECT_TRUE(good->used);
  EXPECT_EQ(good->kind, CalibratorKind::kCluster);
  EXPECT_TRUE(good->member_parallax);
  const nlohmann::json j = result.to_json(m.options);
  const nlohmann::json& first = j["relations"][0]["clusters"][0];
  EXPECT_EQ(first["group"], m.clusters[0].group);
  EXPECT_EQ(first["n_used"], 4);
  EXPECT_EQ(first["members"].size(), 5u);
  EXPECT_EQ(j["model"]["clusters"].size(), 6u);
}

// The bootstrap draws clusters whole: a cluster a resample did not draw has no modulus there
// (NaN), one that it drew has, and no resample fails.
TEST(ClusterFit, BootstrapResamplesClustersAsUnits) {
  ClusterMock m = cluster_mock(12);
  m.options.bootstrap = 24;
  const FitResult result = run_fit(m.options, m.catalog, nullptr);
  const RelationResult& rr = result.relations[0];
  EXPECT_EQ(rr.bootstrap_failed, 0);
  const auto column = [&](const std::string& name) {
    const auto at = std::find(rr.layout.names.begin(), rr.layout.names.end(), name);
    return rr.bootstrap.col(at - rr.layout.names.begin());
  };
  int drawn = 0, total = 0;
  for (const MockCluster& k : m.clusters) {
    const Eigen::VectorXd mu = column("mu_" + k.group);
    drawn += static_cast<int>(mu.array().isFinite().count());
    total += static_cast<int>(mu.size());
  }
  // Six clusters drawn six times: each is left out of a resample with probability (5/6)^6 = 0.33.
  EXPECT_LT(drawn, total);
  EXPECT_GT(drawn, total / 3);
  EXPECT_TRUE(column("alpha").allFinite());
  EXPECT_GT(rr.bootstrap_error("alpha"), 0.0);
}

// The hierarchical joint fit of three relations uses the clusters too: their moduli come
// out near the truth, members enter with their own parallaxes, and its bootstrap draws
// clusters whole.
TEST(ClusterFit, JointFitUsesTheClustersAndResamplesThemWhole) {
  ClusterMock m;
  m.scenario.seed = 14;
  m.scenario.stars = 150;
  m.scenario.clusters = 6;
  m.scenario.cluster_members = 5;
  m.scenario.more_relations = {{"V", -3.9, -2.4, -0.2, 0.20, 0.0},
                               {"K", -5.7, -3.2, -0.2, 0.09, 0.0}};
  m.scenario.scatter_correlation = 0.5;
  m.catalog = mock_calibrator_catalog(m.scenario);
  m.clusters = mock_clusters(m.scenario);
  for (const MockCluster& k : m.clusters)
    m.options.clusters.push_back({k.group, k.parallax_mas, k.parallax_err_mas, NAN, NAN});
  for (const char* band : {"V", "K"}) {
    RelationOptions r = m.options.relations[0];
    r.name = r.band = band;
    m.options.relations.push_back(r);
  }
  m.options.joint = true;
  m.options.joint_bootstrap = 12;
  const FitResult result = run_fit(m.options, m.catalog, nullptr);
  ASSERT_TRUE(result.joint.has_value());
  const JointResult& j = *result.joint;
  ASSERT_TRUE(j.solution.usable);
  ASSERT_TRUE(j.solution.covariance_ok);
  int members_with_parallax = 0;
  for (int i = 0; i < j.data.stars(); ++i)
    members_with_parallax += j.data.kind[static_cast<std::size_t>(i)] == JointStarKind::kGroup &&
                             j.data.var_plx[static_cast<std::size_t>(i)] > 0;
  EXPECT_GE(members_with_parallax, 25);
  ASSERT_EQ(j.data.group_plx.size(), 6u);
  int drawn = 0;
  for (const MockCluster& k : m.clusters) {
    const auto at = std::find(j.layout.names.begin(), j.layout.names.end(), "mu_" + k.group);
    ASSERT_NE(at, j.layout.names.end()) << k.group;
    const auto p = at - j.layout.names.begin();
    EXPECT_NEAR(j.solution.theta[p], k.mu, 3.0 * std::sqrt(j.solution.covariance(p, p))) << k.group;
    drawn += static_cast<int>(j.bootstrap.col(p).array().isFinite().count());
  }
  EXPECT_LT(drawn, 6 * 12);
  EXPECT_GT(drawn, 6 * 12 / 3);
}

// The options' rules. Outside the hierarchical space a cluster's parallax becomes the
// modulus prior it implies (first order: 5 / ln 10 sigma / pi), refused below S/N 10.
TEST(ClusterOptions, RulesNameTheBrokenOne) {
  FitOptions o = test::mock_fit_options();
  ClusterOptions k;
  k.group = "CL-A";
  o.clusters.push_back(k);
  EXPECT_NE(o.check().find("cluster.parallax_mas: cluster CL-A needs a parallax"),
            std::string::npos)
      << o.check();
  o.clusters[0].parallax_mas = 0.4;
  EXPECT_NE(o.check().find("cluster.parallax_err_mas: must be positive"), std::string::npos)
      << o.check();
  o.clusters[0].parallax_err_mas = 0.01;
  EXPECT_EQ(o.check(), "");
  o.space = FitSpace::kParallax;
  EXPECT_EQ(o.check(), "");  // S/N 40: a modulus prior, 10 - 5 log10(0.4) +- 0.054
  EXPECT_NEAR(o.clusters[0].modulus_prior().first, 11.9897, 1e-4);
  EXPECT_NEAR(o.clusters[0].modulus_prior().second, 0.05429, 1e-5);
  o.clusters[0].parallax_err_mas = 0.05;
  EXPECT_NE(o.check().find("needs a parallax S/N of 10 or more (cluster CL-A has 8.0)"),
            std::string::npos)
      << o.check();
  o.clusters[0] = ClusterOptions{"CL-A", NAN, NAN, 10.4, 0.05};
  EXPECT_EQ(o.check(), "");
  o.anchors.push_back(AnchorOptions{"CL-A", 18.5, 0.02});
  EXPECT_NE(o.check().find("'CL-A' names two groups"), std::string::npos) << o.check();
}

// A cluster given by its modulus alone is an anchor-like group in the GLS space too.
TEST(ClusterFit, ModulusOnlyClusterFitsInTheParallaxSpace) {
  ClusterMock m = cluster_mock(13);
  m.options.space = FitSpace::kParallax;
  for (std::size_t k = 0; k < m.clusters.size(); ++k)
    m.options.clusters[k] = ClusterOptions{m.clusters[k].group, NAN, NAN, m.clusters[k].mu, 0.05};
  const FitResult result = run_fit(m.options, m.catalog, nullptr);
  const RelationResult& rr = result.relations[0];
  ASSERT_TRUE(rr.covariance_ok);
  for (const MockCluster& k : m.clusters)
    EXPECT_NEAR(rr.parameter("mu_" + k.group), k.mu, 3.0 * rr.error("mu_" + k.group)) << k.group;
  const StarOutcome* member = outcome(rr, m.clusters[0].group + "-001");
  ASSERT_NE(member, nullptr);
  EXPECT_TRUE(member->used);
  EXPECT_FALSE(member->member_parallax);
  EXPECT_NE(member->reason.find("only the hierarchical space"), std::string::npos)
      << member->reason;
}

// [[cluster]] in a config file: read, and a cluster with neither a parallax nor a modulus
// stops with the rule.
TEST(ClusterOptions, ReadFromTheConfigAndRefusedWithTheRule) {
  test::TempDir dir;
  const std::string head =
      "[fit]\ninput = \"cat.fits\"\n[[relation]]\nname = \"W\"\nband = \"W\"\n";
  test::write_text(dir.file("good.toml"),
                   head +
                       "[[cluster]]\ngroup = \"CL-A\"\nparallax_mas = 0.41\nparallax_err_mas = "
                       "0.01\n[[cluster]]\ngroup = \"CL-B\"\nmu = 10.2\nmu_err = 0.04\n");
  const FitOptions o = fit_options_from_file(dir.file("good.toml"));
  ASSERT_EQ(o.clusters.size(), 2u);
  EXPECT_DOUBLE_EQ(o.clusters[0].parallax_mas, 0.41);
  EXPECT_TRUE(std::isnan(o.clusters[0].mu));
  EXPECT_DOUBLE_EQ(o.clusters[1].mu_err, 0.04);
  test::write_text(dir.file("bad.toml"), head + "[[cluster]]\ngroup = \"CL-A\"\n");
  try {
    fit_options_from_file(dir.file("bad.toml"));
    FAIL() << "no error";
  } catch (const InputError& e) {
    EXPECT_NE(std::string(e.what()).find("cluster.parallax_mas"), std::string::npos) << e.what();
  }
}

}  // namespace
}  // namespace rungcal
