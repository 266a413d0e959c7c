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
#include "rungcal/plfit/priors.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fit_residuals_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal::fit_parts {
namespace {

std::uint64_t resample_seed(std::uint64_t seed, int b) {
  // splitmix64 of (seed, b): resample b draws the same stars whichever thread runs it.
  std::uint64_t z = seed + 0x9E3779B97F4A7C15ull * static_cast<std::uint64_t>(b + 1);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
  return z ^ (z >> 31);
}

std::vector<Eigen::Index> group_members(const FitData& data, int g) {
  std::vector<Eigen::Index> members;
  for (Eigen::Index i = 0; i < data.anchor.size(); ++i)
    if (data.group[static_cast<std::size_t>(i)] == g) members.push_back(i);
  return members;
}

}  // namespace

std::vector<int> draw_clusters(const ModelTerms& terms, Random& rng) {
  std::vector<int> drawn;
  const int first = terms.n_anchors - terms.n_clusters;
  for (int k = 0; k < terms.n_clusters; ++k)
    drawn.push_back(first +
                    static_cast<int>(rng.below(static_cast<std::uint64_t>(terms.n_clusters))));
  return drawn;
}

void weigh_cluster_parallaxes(const ModelTerms& terms, const std::vector<int>& drawn,
                              std::vector<FitData::GroupParallax>& groups) {
  if (groups.empty()) return;
  for (int g = terms.n_anchors - terms.n_clusters; g < terms.n_anchors; ++g)
    groups[static_cast<std::size_t>(g)].weight =
        static_cast<double>(std::count(drawn.begin(), drawn.end(), g));
}

void forget_undrawn_clusters(const ModelTerms& terms, int anchor0, const std::vector<int>& drawn,
                             Eigen::VectorXd& theta) {
  for (int g = terms.n_anchors - terms.n_clusters; g < terms.n_anchors; ++g)
    if (std::find(drawn.begin(), drawn.end(), g) == drawn.end())
      theta[anchor0 + g] = std::numeric_limits<double>::quiet_NaN();
}

Eigen::MatrixXd parallel_bootstrap(const FitOptions& o, int P, const std::string& label,
                                   const ResampleSolve& solve, int& failed) {
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

void shift_resamples(const Eigen::VectorXd& shift, Eigen::MatrixXd& samples) {
  if (shift.size() != samples.cols()) return;
  samples.rowwise() += shift.transpose();  // NaN (failed or undrawn) entries stay NaN
}

void run_bootstrap(const FitOptions& o, RelationResult& rr, const FitData& data) {
  if (o.bootstrap <= 0) return;
  // Resamples start at the optimum; 1e-9 in the cost and 1e-8 in the step are far below
  // their statistical spread.
  FitSettings settings = rr.settings;
  settings.function_tolerance = 1e-9;
  settings.parameter_tolerance = 1e-8;
  settings.initial_trust_region_radius = 1e8;
  // Each group's anchor stars, found once: every resample draws from them.
  const ModelTerms& terms = rr.settings.terms;
  std::vector<std::vector<Eigen::Index>> group_stars;
  for (int g = 0; g < terms.n_anchors; ++g) group_stars.push_back(group_members(data, g));
  auto solve = [&](Random& rng) -> std::optional<Eigen::VectorXd> {
    auto draw = [&](Eigen::Index n) {
      std::vector<Eigen::Index> idx(static_cast<std::size_t>(n));
      for (auto& i : idx) i = static_cast<Eigen::Index>(rng.below(static_cast<std::uint64_t>(n)));
      return idx;
    };
    std::vector<Eigen::Index> ai;
    // Anchors are resampled within each galaxy so each keeps its stars.
    for (int g = 0; g < terms.n_anchors - terms.n_clusters; ++g) {
      const std::vector<Eigen::Index>& members = group_stars[static_cast<std::size_t>(g)];
      for (std::size_t k = 0; k < members.size(); ++k)
        ai.push_back(members[rng.below(members.size())]);
    }
    const std::vector<int> drawn_clusters = draw_clusters(terms, rng);
    for (int g : drawn_clusters)
      for (Eigen::Index i : group_stars[static_cast<std::size_t>(g)]) ai.push_back(i);
    FitData sample = data.take(draw(data.parallax.size()), draw(data.known.size()), ai);
    weigh_cluster_parallaxes(terms, drawn_clusters, sample.group_plx);
    // Each prior's centre is redrawn from its own Gaussian, so the resamples carry the
    // prior's uncertainty as the covariance does (method brief, section 4b).
    FitSettings drawn = settings;
    redraw_prior_centres(drawn, rr.layout, rng);
    FitSolution s = solve_fit(sample, drawn, rr.layout,
                              gauss_newton_start(sample, drawn, rr.layout, rr.solution.theta));
    if (!s.usable) return std::nullopt;
    Eigen::VectorXd theta = s.theta;
    forget_undrawn_clusters(terms, rr.layout.anchor0, drawn_clusters, theta);
    return theta;
  };
  rr.bootstrap =
      parallel_bootstrap(o, rr.layout.size, rr.relation.name, solve, rr.bootstrap_failed);
  shift_resamples(rr.restricted_shift, rr.bootstrap);
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

double bootstrap_spread(const std::vector<double>& v) {
  if (v.size() < 2) return std::numeric_limits<double>::quiet_NaN();
  return 0.5 * (percentile(v, 0.84) - percentile(v, 0.16));
}

std::vector<double> bootstrap_column(const Eigen::MatrixXd& samples, int j) {
  std::vector<double> v;
  for (Eigen::Index b = 0; b < samples.rows(); ++b)
    if (std::isfinite(samples(b, j))) v.push_back(samples(b, j));
  return v;
}

std::vector<double> bootstrap_column(const RelationResult& rr, int j) {
  return bootstrap_column(rr.bootstrap, j);
}

// Every bootstrap resample's parameters, one row per resample and parameter (NaN for a
// failed resample, or a cluster the resample did not draw), so a user can form any
// statistic of them.
StarTable bootstrap_table(const FitResult& result) {
  StarTable t;
  t.add_column(residual_col::kRelation, ColumnType::kText, "", "relation, or 'joint'");
  t.add_column(residual_col::kResample, ColumnType::kInteger, "",
               "resample index b (seeded per b)");
  t.add_column(residual_col::kParameter, ColumnType::kText);
  t.add_column(residual_col::kValue, ColumnType::kReal, "",
               "parameter's value in resample b (NaN: failed, or a cluster it did not draw)");
  auto add = [&](const std::string& relation, const std::vector<std::string>& names,
                 const Eigen::MatrixXd& samples) {
    for (Eigen::Index b = 0; b < samples.rows(); ++b)
      for (Eigen::Index j = 0; j < samples.cols(); ++j) {
        t.column(residual_col::kRelation).push_text(relation);
        t.column(residual_col::kResample).push_integer(b);
        t.column(residual_col::kParameter).push_text(names[static_cast<std::size_t>(j)]);
        t.column(residual_col::kValue).push_real(samples(b, j));
      }
  };
  for (const auto& rr : result.relations) add(rr.relation.name, rr.layout.names, rr.bootstrap);
  if (result.joint) add("joint", result.joint->layout.names, result.joint->bootstrap);
  return t;
}

}  // namespace rungcal::fit_parts
