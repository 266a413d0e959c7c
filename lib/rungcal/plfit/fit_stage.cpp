// SPDX-License-Identifier: MIT
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/plfit/fit_parts.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
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
#include "rungcal/plfit/sandwich.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fit_residuals_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {
using namespace fit_parts;
namespace {

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
          ? 2.0 * hierarchical_value(c.data, rr.settings, rr.layout, rr.likelihood_optimum())
                      .neg_log_likelihood
          : (res.r.square() + (2.0 * std::numbers::pi * res.s2).log()).sum();
  rr.n_used = static_cast<int>(order.size());
  rr.n_free = 0;
  for (const auto& p : rr.settings.params) rr.n_free += p.mode == ParamMode::kFixed ? 0 : 1;
  rr.dof = rr.n_used - rr.n_free;
  rr.aic = rr.neg2_log_likelihood + 2.0 * rr.n_free;
  rr.bic = rr.neg2_log_likelihood + rr.n_free * std::log(static_cast<double>(rr.n_used));
}

}  // namespace

double RelationResult::parameter(const std::string& name) const {
  return solution.theta[index_of(layout, name)];
}
double RelationResult::error(const std::string& name) const {
  int j = index_of(layout, name);
  if (!covariance_ok || !std::isfinite(covariance(j, j)))
    return std::numeric_limits<double>::quiet_NaN();
  return std::sqrt(std::max(0.0, covariance(j, j)));
}
double RelationResult::bootstrap_error(const std::string& name) const {
  return bootstrap_spread(bootstrap_column(*this, index_of(layout, name)));
}

void fit_parts::adopt_sandwich(bool wanted, const Eigen::MatrixXd& sandwich,
                               Eigen::MatrixXd& covariance, std::string& method,
                               std::vector<std::string>& warnings) {
  if (!wanted) return;
  if (sandwich.size() == 0) {
    warnings.emplace_back(
        "the sandwich covariance could not be formed: the errors are the inverse Hessian's");
    return;
  }
  covariance = sandwich;
  method = "sandwich";
}

FitResult run_fit(const FitOptions& o, const StarTable& cat, const StarTable* coefficients) {
  throw_if_invalid(o.check(), o.config_file);
  ParallaxTools tools;
  if (o.zero_point == ZeroPointRecipe::kLindegren2021) {
    tools.zp5 = ZeroPointTable::from_file(o.zero_point_table_5p);
    tools.zp6 = ZeroPointTable::from_file(o.zero_point_table_6p);
  }
  const std::vector<std::string> anchor_names = o.group_names();
  FitResult result;
  for (const auto& rel : o.relations) {
    RelationResult rr;
    rr.relation = rel;
    Calibrators c = select_calibrators(o, rel, cat, tools, o.offset);
    const bool hierarchical = o.space == FitSpace::kHierarchical;
    HierarchicalSettings grid = o.hierarchical;
    const int bins = hierarchical &&
                             o.hierarchical.prior == DistancePriorFamily::kSmoothHistogram &&
                             c.data.parallax.size() > 0
                         ? histogram_grid(c.data, grid)
                         : 0;
    rr.layout = ParameterLayout::for_terms(
        ModelTerms{rel.pivot_log_period, rel.break_log_period.has_value(),
                   rel.break_log_period.value_or(0.0), rel.metallicity,
                   static_cast<int>(anchor_names.size()), hierarchical,
                   hierarchical && rel.metallicity && has_feh_errors(c.data), bins,
                   hierarchical && o.hierarchical.blends != BlendComponent::kNone},
        anchor_names);
    rr.settings = settings_for(o, rel, rr.layout);
    rr.settings.hierarchical = grid;
    hold_unconstrained(c, rr);
    rr.stars = c.stars;
    if (!hierarchical)
      for (const ClusterOptions& k : o.clusters)
        if (k.has_parallax())
          rr.warnings.push_back(k.has_modulus()
                                    ? fmt::format("cluster {}: its parallax is used in the "
                                                  "hierarchical space only; here its modulus is",
                                                  k.group)
                                    : fmt::format("cluster {}: its parallax enters as the modulus "
                                                  "prior {:.3f} +- {:.3f} it implies, "
                                                  "without the parallax offset; the hierarchical "
                                                  "space fits it with the offset",
                                                  k.group, k.modulus_prior().first,
                                                  k.modulus_prior().second));
    check_constrained(o, rel, c, rr.settings, rr.layout);
    if (o.space == FitSpace::kMagnitude) {
      int noisy = 0;
      for (Eigen::Index i = 0; i < c.data.parallax.size(); ++i)
        noisy += std::sqrt(c.data.var_plx[i]) > 0.1 * c.data.plx[i] ? 1 : 0;
      if (noisy > 0) {
        rr.warnings.push_back(fmt::format(
            "{} of {} parallax stars have sigma_pi/pi > 0.1: a magnitude-space fit of such "
            "parallaxes is biased "
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
      throw InputError(
          {o.input_path, {}, {}}, "degenerate_fit",
          fmt::format(
              "relation {}: the fit has no finite solution ({}); look for absurd values among the "
              "calibrators (parallax, period, [Fe/H]) or the zero-point table",
              rel.name, rr.solution.message));
    if (!rr.solution.usable)
      rr.warnings.push_back("the solver did not reach a usable solution: " + rr.solution.message);
    if (hierarchical) {
      // The Hessian also gives the bootstrap's metric: each resample's optimum is near the
      // full sample's, and so is its curvature, which BFGS then need not learn.
      const bool want_sandwich =
          rr.settings.hierarchical.covariance == CovarianceEstimate::kSandwich;
      Eigen::MatrixXd sandwich;
      rr.covariance_ok = hierarchical_covariance(
          data, rr.settings, rr.layout, rr.solution.theta, rr.covariance, rr.undetermined,
          &rr.settings.preconditioner, want_sandwich ? &sandwich : nullptr);
      if (rr.covariance_ok &&
          rr.settings.hierarchical.scatter_correction == ScatterCorrection::kRestricted) {
        const Eigen::VectorXd moved =
            hierarchical_restricted(data, rr.settings, rr.layout, rr.solution.theta, rr.covariance);
        rr.restricted_shift = moved - rr.solution.theta;
        rr.solution.theta = moved;
      }
      adopt_sandwich(want_sandwich && rr.covariance_ok, sandwich, rr.covariance,
                     rr.covariance_method, rr.warnings);
    } else {
      rr.covariance_ok =
          fit_covariance(data, rr.settings, rr.layout, rr.solution.theta, rr.covariance);
      // A robust loss is not the data's likelihood: its inverse Hessian understates the
      // spread of the estimates, the sandwich does not.
      Eigen::MatrixXd sandwich;
      if (o.loss != LossKind::kNone && rr.covariance_ok &&
          sandwich_covariance(data, rr.settings, rr.layout, rr.solution.theta, rr.covariance,
                              sandwich)) {
        rr.covariance = sandwich;
        rr.covariance_method = "sandwich";
      }
      // Asked for, a sandwich without a loss here would be the plain fit's, which is not built:
      // say so rather than let "hessian" in the result pass unread.
      if (o.hierarchical.covariance == CovarianceEstimate::kSandwich && o.loss == LossKind::kNone)
        rr.warnings.push_back(
            "covariance = \"sandwich\" applies to the hierarchical fit (and every robust loss "
            "has its own): these errors are the inverse Hessian's");
      // A redescending loss gives a star beyond its scale no weight at all, so the Gaussian
      // likelihood of the rest drives sigma_int down: it is not an estimate of the scatter.
      if (o.loss == LossKind::kTukey && o.scatter.mode != ParamMode::kFixed)
        rr.undetermined.push_back("sigma_int");
    }
    for (const auto& name : rr.undetermined) {
      const int j = index_of(rr.layout, name);
      rr.covariance.row(j).setConstant(std::numeric_limits<double>::quiet_NaN());
      rr.covariance.col(j).setConstant(std::numeric_limits<double>::quiet_NaN());
    }
    auto estimate = [&](const std::string& n) { return rr.solution.theta[index_of(rr.layout, n)]; };
    for (std::string& w : undetermined_warnings(
             rr.undetermined, estimate,
             [&](const std::string& n) { return undetermined_reason(n, estimate(n)); }))
      rr.warnings.push_back(std::move(w));
    if (!rr.covariance_ok)
      rr.warnings.push_back("the covariance could not be computed (degenerate parameters?)");
    if (std::string w = blend_start_warning(rr); !w.empty()) rr.warnings.push_back(std::move(w));
    fill_star_residuals(rr, c);
    run_bootstrap(o, rr, data);
    for (const auto& w : rr.warnings) spdlog::warn("relation {}: {}", rel.name, w);
    result.relations.push_back(std::move(rr));
  }
  if (o.joint) result.joint = run_joint(o, result.relations, cat, coefficients);
  return result;
}

FitResult fit_catalog_file(const FitOptions& o) {
  SourceTable in = read_fits_table(o.input_path, {catalog_hdu::kCatalog, 0});
  std::optional<SourceTable> coeffs;
  if (o.joint) {
    try {
      coeffs = read_fits_table(o.input_path, {catalog_hdu::kCoefficients, 0});
    } catch (const InputError& e) {
      if (e.rule() != "fits_hdu") throw;
    }
  }
  FitResult result = run_fit(o, in.table, coeffs ? &coeffs->table : nullptr);
  result.provenance = Provenance::for_stage("fit");
  result.provenance.config_sha256 = o.config_sha256;
  for (const auto& [keyword, field] : {std::pair{"RGLAW", "law"}, std::pair{"RGRV", "r_v"},
                                       std::pair{"RGBNDSHA", "band_table_sha256"}})
    if (const Keyword* k = in.table.keyword(keyword))
      std::visit([&, f = field](const auto& v) { result.extinction[f] = v; }, k->value);
  result.provenance.inputs.push_back(
      {o.input_path, sha256_file(o.input_path), static_cast<std::int64_t>(in.table.rows())});
  if (o.zero_point == ZeroPointRecipe::kLindegren2021) {
    result.provenance.inputs.push_back(
        {o.zero_point_table_5p, sha256_file(o.zero_point_table_5p), -1});
    result.provenance.inputs.push_back(
        {o.zero_point_table_6p, sha256_file(o.zero_point_table_6p), -1});
  }
  // Residuals per star and relation.
  StarTable res;
  for (const char* c :
       {residual_col::kRelation, residual_col::kId, residual_col::kKind, residual_col::kReason})
    res.add_column(c, ColumnType::kText);
  res.add_column(residual_col::kUsed, ColumnType::kBoolean);
  res.add_column(residual_col::kLogPeriodF, ColumnType::kReal, "",
                 "log10 of the (fundamentalized) period in days");
  res.add_column(residual_col::kM0, ColumnType::kReal, "mag", "magnitude the relation uses");
  res.add_column(residual_col::kM0Err, ColumnType::kReal, "mag");
  res.add_column(residual_col::kAbsMagModel, ColumnType::kReal, "mag",
                 "relation's absolute magnitude");
  res.add_column(residual_col::kResidual, ColumnType::kReal, "",
                 "normalised residual at the optimum");
  res.add_column(residual_col::kParallaxCorrectedMas, ColumnType::kReal, "mas",
                 "parallax minus zero point");
  res.add_column(residual_col::kParallaxErrMas, ColumnType::kReal, "mas",
                 "inflated parallax error");
  res.add_column(residual_col::kPredicted, ColumnType::kReal, "",
                 "photometric parallax (mas, parallax space) or predicted m0");
  // Where zero-point, offset and metallicity problems show: [Fe/H] and G beside each residual.
  res.add_column(residual_col::kFeh, ColumnType::kReal, "", "[Fe/H] (dex)");
  res.add_column(residual_col::kGaiaGMag, ColumnType::kReal, "mag");
  res.add_column(residual_col::kMembership, ColumnType::kReal, "",
                 "hierarchical fit: probability of being a member, not an outlier");
  for (const auto& rr : result.relations) {
    for (const auto& s : rr.stars) {
      res.column(residual_col::kRelation).push_text(rr.relation.name);
      res.column(residual_col::kId).push_text(s.id);
      s.kind == CalibratorKind::kNone
          ? res.column(residual_col::kKind).push_null()
          : res.column(residual_col::kKind)
                .push_text(std::string(kCalibratorKindNames.name(s.kind)));
      s.reason.empty() ? res.column(residual_col::kReason).push_null()
                       : res.column(residual_col::kReason).push_text(s.reason);
      res.column(residual_col::kUsed).push_boolean(s.used);
      res.column(residual_col::kLogPeriodF)
          .push_real(s.kind == CalibratorKind::kNone && s.log_period == 0 ? std::nan("")
                                                                          : s.log_period);
      res.column(residual_col::kM0).push_real(s.m0_err > 0 ? s.m0 : std::nan(""));
      res.column(residual_col::kM0Err).push_real(s.m0_err > 0 ? s.m0_err : std::nan(""));
      res.column(residual_col::kAbsMagModel).push_real(s.model_abs_mag);
      res.column(residual_col::kResidual).push_real(s.residual);
      res.column(residual_col::kParallaxCorrectedMas).push_real(s.plx);
      res.column(residual_col::kParallaxErrMas).push_real(s.plx_err);
      res.column(residual_col::kPredicted).push_real(s.predicted);
      res.column(residual_col::kFeh)
          .push_real(in.table.has(col::kFeh) ? in.table.column(col::kFeh).as_real(s.row)
                                             : std::nan(""));
      res.column(residual_col::kGaiaGMag)
          .push_real(in.table.has(col::kGaiaG) ? in.table.column(col::kGaiaG).as_real(s.row)
                                               : std::nan(""));
      res.column(residual_col::kMembership).push_real(s.membership);
    }
  }
  stamp_provenance(res, result.provenance, "fit_residuals");
  const std::string residuals = fit_residuals_path(o);
  if (!Cluster::world().writes_outputs()) return result;
  StarTable boot = bootstrap_table(result);
  stamp_provenance(boot, result.provenance, "fit_bootstrap");
  std::vector<std::pair<std::string, const StarTable*>> hdus{{residuals_hdu::kResiduals, &res}};
  if (boot.rows() > 0) hdus.emplace_back(residuals_hdu::kBootstrap, &boot);
  write_fits_tables(residuals, hdus);
  write_file_atomically(o.output_path, result.to_json(o).dump(2) + "\n");
  return result;
}

}  // namespace rungcal
