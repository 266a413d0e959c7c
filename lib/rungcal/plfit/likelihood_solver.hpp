// SPDX-License-Identifier: MIT
#pragma once
// Maximum likelihood over parameters that live in domains (scatters > 0, fractions in (0, 1),
// correlations in (-1, 1)): the solver works on unbounded coordinates, BFGS with an analytic
// gradient, and the covariance comes from the Hessian. Internal to plfit: the single-relation
// (hierarchical.hpp) and joint (joint_hierarchical.hpp) likelihoods share it.

#include <memory>
#include <string>
#include <vector>

#include <Eigen/Core>

#include "rungcal/plfit/model.hpp"
#include "rungcal/plfit/priors.hpp"

namespace rungcal::hier {

// How a reported parameter maps to the solver's coordinate.
enum class Scale {
  kLinear,
  kLog,         // v > 0: x = ln v
  kLogPlusOne,  // v > -1: x = ln(v + 1)
  kLogit,       // 0 < v < 1: x = ln(v / (1 - v))
  kAtanh,       // -1 < v < 1: x = atanh v
  // v > 3: x = ln(v - 3). The outlier component's parallax factor: a deviation of three
  // errors or fewer is a member's, and a factor free below that would take the members' tails.
  kLogAboveThree,
};

// The solver never reaches an edge of a domain; a value on it (a scatter fixed or started at
// 0) is moved just inside.
double to_internal(Scale s, double v);
double to_external(Scale s, double x);
// d external / d internal, at the external value v.
double slope_of(Scale s, double v);
Eigen::VectorXd internal_of(const std::vector<Scale>& scales, const Eigen::VectorXd& theta);
Eigen::VectorXd external_of(const std::vector<Scale>& scales, const Eigen::VectorXd& x);

// The terms -ln L adds beyond the stars: the smooth histogram's random-walk hyperprior on its
// log-weights eta_1 .. eta_n at t[bin0 ...] (eta_0 = 0; none when n = 0; step walk_sigma)
// and the Gaussian priors' whitened rows (priors.hpp). Adds their gradient to g (external
// parameters) and returns their -ln p.
double hyperprior_terms(const Eigen::VectorXd& t, int bin0, int n, double walk_sigma,
                        const std::vector<PriorRow>& rows, const std::vector<ParamSpec>& params,
                        Eigen::VectorXd& g);

// The gradient in the solver's coordinates from the one in the reported parameters.
void internal_gradient(const std::vector<Scale>& scales, const Eigen::VectorXd& t,
                       const Eigen::VectorXd& g, Eigen::VectorXd& grad);

// -ln L (priors included) and its gradient in the solver's coordinates (full length).
class Objective {
 public:
  virtual ~Objective() = default;
  // Non-finite when x is outside what the model allows (the solver then steps back).
  virtual double evaluate(const Eigen::VectorXd& x, Eigen::VectorXd* gradient) = 0;
};

// A -ln L that sums over stars, plus terms that are not one star's (priors, hyperpriors,
// cluster parallaxes): what the sandwich needs of it.
class StarSumObjective : public Objective {
 public:
  // Each star's d ln L_i / d x (solver's coordinates) as a row, in the data's star order, from
  // the next evaluations on; nullptr: none. A star a bootstrap drew w times gives w times its
  // score, which the sandwich (full samples only, every count 1) does not meet.
  virtual void collect_scores(Eigen::MatrixXd* scores) = 0;
  // From now on only the terms that are not a sum over stars.
  virtual void drop_stars() = 0;
};

// The parameters whose mode is not fixed.
std::vector<int> free_parameters(const std::vector<ParamSpec>& params);

// Minimises from `start` (external parameters); fixed parameters stay at theirs. Tolerances,
// iterations and the optional metric come from `settings` (FitSettings::preconditioner).
FitSolution minimise(Objective& f, const std::vector<Scale>& scales, const FitSettings& settings,
                     const Eigen::VectorXd& start);

// The inverse Hessian of -ln L at theta over `measured` (free parameters not on an edge of
// their domain), carried to the reported parameters by the delta method; the other rows are
// zero. preconditioner: when given, the bootstrap's metric over every free parameter (see
// FitSettings::preconditioner). inverse: when given, set to the inverse Hessian over
// `measured` in the solver's coordinates (what sandwich_from_hessian takes). Returns false when the
// Hessian is not positive definite.
bool covariance_from_hessian(Objective& f, const std::vector<Scale>& scales,
                             const std::vector<int>& measured, const std::vector<int>& free,
                             const Eigen::VectorXd& theta, Eigen::MatrixXd& covariance,
                             std::shared_ptr<const Eigen::MatrixXd>* preconditioner,
                             Eigen::MatrixXd* inverse = nullptr);

// The sandwich covariance of a likelihood whose model may be wrong (Huber 1967, Proc. Fifth
// Berkeley Symp. 1, 221; White 1982, Econometrica 50, 1): the units (stars) are independent
// given the parameters, s_u each one's score d ln L_u / d x, and
//   Cov = H^-1 (n / (n - p) sum_u s_u s_u^T + H_rest) H^-1
// over `measured` (n units), carried to the reported parameters as covariance_from_hessian
// does. H is the Hessian of the whole -ln L; H_rest the Hessian of its terms that are not a
// sum over units (priors, hyperpriors, cluster parallaxes): their information is the model's,
// not an estimate from one draw. n / (n - p) is MacKinnon & White's (1985, J. Econometrics
// 29, 305) HC1 small-sample factor, p the parameters the units determine, tr(H^-1 H_units) =
// |measured| - tr(H^-1 H_rest): a parameter a prior holds counts for less (the distance
// histogram's log-weights, loosely held by their random walk, still count for most of
// theirs: p is about 28 at N = 300, docs/method.md). When the model is right
// the bracket's expectation is H and the sandwich is the inverse Hessian; when it is not
// (contaminants drawn from another law than the fit's), the sandwich follows the estimates'
// spread and the inverse Hessian does not. unit_scores: one row per unit, full length, in
// the solver's coordinates; inverse: H^-1 there, as covariance_from_hessian gives it.
bool sandwich_from_hessian(const Eigen::MatrixXd& inverse, const Eigen::MatrixXd& unit_scores,
                           Objective& rest, const std::vector<Scale>& scales,
                           const std::vector<int>& measured, const Eigen::VectorXd& theta,
                           Eigen::MatrixXd& covariance);

// covariance_from_hessian of f; when `sandwich` is given, also the sandwich over f's `stars`
// (sandwich_from_hessian; `rest` is another f, whose stars it drops), or emptied when it
// cannot be formed. Returns covariance_from_hessian's verdict.
bool hessian_and_sandwich(StarSumObjective& f, StarSumObjective& rest, Eigen::Index stars,
                          const std::vector<Scale>& scales, const std::vector<int>& measured,
                          const std::vector<int>& free, const Eigen::VectorXd& theta,
                          Eigen::MatrixXd& covariance,
                          std::shared_ptr<const Eigen::MatrixXd>* preconditioner,
                          Eigen::MatrixXd* sandwich);

// Restricted maximum likelihood's scatters (ScatterCorrection::kRestricted, model.hpp): one
// Newton step on -ln L + 1/2 ln det H_LL from the maximum-likelihood optimum theta, where
// H_LL is the Hessian of -ln L over `location` in the solver's coordinates. The step's
// gradient is the penalty's derivative along each of `scatter` (central differences of
// ln det H_LL, each H_LL from the analytic gradient); its metric is the inverse Hessian,
// `covariance` (reported parameters, as covariance_from_hessian gives it), so every measured
// parameter moves with the scatters as their correlations say. Parameters whose covariance
// is not finite and positive are neither location, scatter nor moved. Returns theta moved;
// theta itself when no scatter or location parameter is measured or a step is not finite.
Eigen::VectorXd restricted_step(Objective& f, const std::vector<Scale>& scales,
                                const std::vector<int>& location, const std::vector<int>& scatter,
                                const Eigen::VectorXd& theta, const Eigen::MatrixXd& covariance);

}  // namespace rungcal::hier
