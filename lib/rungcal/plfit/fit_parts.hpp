// SPDX-License-Identifier: MIT
#pragma once

// The fit stage's parts, shared by its files (fit_stage.cpp runs them; calibrators.cpp,
// fit_settings.cpp, fit_bootstrap.cpp, fit_joint_run.cpp and fit_result_json.cpp each hold
// one job). Not an interface of its own: include fit_stage.hpp from outside the stage.

#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include <Eigen/Core>
#include <nlohmann/json.hpp>

#include "rungcal/astrometry/astrometry.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/plfit/fit_stage.hpp"

namespace rungcal::fit_parts {

struct Calibrators {
  FitData data;
  std::vector<StarOutcome> stars;                   // every catalog star, in catalog order
  std::vector<std::size_t> p_star, k_star, a_star;  // index into stars per data row
};

struct ParallaxTools {
  std::optional<ZeroPointTable> zp5, zp6;
};

// Chooses one relation's calibrators from the catalog; every refusal keeps its reason.
Calibrators select_calibrators(const FitOptions& o, const RelationOptions& rel,
                               const StarTable& cat, const ParallaxTools& tools,
                               const ParamSpec& offset);
// The clusters' parallaxes by group (anchors first, with none), FitData::group_plx: empty
// when no cluster has one or outside the hierarchical space, where none enters as a term.
std::vector<FitData::GroupParallax> cluster_parallaxes(const FitOptions& o);
// Data rows with nothing to constrain a parameter make the fit degenerate; says so plainly
// (exit 2), with the refusals grouped by reason.
void check_constrained(const FitOptions& o, const RelationOptions& rel, const Calibrators& c,
                       const FitSettings& s, const ParameterLayout& L);

// True when any calibrator has an [Fe/H] error (the hierarchical model then marginalises it).
bool has_feh_errors(const FitData& d);
// The solver's settings and each parameter's mode for one relation.
FitSettings settings_for(const FitOptions& o, const RelationOptions& rel, const ParameterLayout& L);
// Parameters nothing in the data can constrain are held where they start, and said so.
void hold_unconstrained(const Calibrators& c, RelationResult& rr);
// Why a parameter has no error, as the result file and the terminal say it.
std::string undetermined_reason(const std::string& name, double value);
// The warnings for the parameters without an error, `value(name)` each one's estimate: a
// component's shape (the outliers' shift, width and parallax factor; the blends' scale) is
// said within its fraction's warning when the fraction has none either (no outliers, so no
// shape), else alone. `other(name)` words a parameter that is neither.
std::vector<std::string> undetermined_warnings(
    const std::vector<std::string>& names, const std::function<double(const std::string&)>& value,
    const std::function<std::string(const std::string&)>& other);
// A warning when the blend component starts within 2.5 sigma_int of the members (at sigma_int
// 0.2 mag, the default 0.3 mag start): blends that brighten a star by less than a few member
// widths look like the members' bright tail, so the estimates lean on where the component
// starts and how it rises (docs/simulation-history.md, "The blend law near its start": 1.5 widths
// out it moved alpha by +-0.2 errors, 3.75 widths out by -0.08). Empty without a blend component,
// without blends (fraction under 1e-3) or with the start beyond 2.5 widths.
std::string blend_start_warning(const RelationResult& rr);
// After the restricted step, whose metric is the inverse Hessian: the sandwich, when it was
// asked for (`wanted`) and formed, becomes the reported covariance and `method` says so; asked
// for but not formed (empty), a warning says the errors are the inverse Hessian's.
void adopt_sandwich(bool wanted, const Eigen::MatrixXd& sandwich, Eigen::MatrixXd& covariance,
                    std::string& method, std::vector<std::string>& warnings);
// A parameter's index by name (std::out_of_range when there is none).
int index_of(const ParameterLayout& L, const std::string& name);

// One resample's fit: its parameters, or nothing when it failed.
using ResampleSolve = std::function<std::optional<Eigen::VectorXd>(Random&)>;
// Runs o.bootstrap resamples over the configured threads (and MPI ranks) with a progress
// bar; rows in resample order, NaN for failures, identical for any thread count.
Eigen::MatrixXd parallel_bootstrap(const FitOptions& o, int P, const std::string& label,
                                   const ResampleSolve& solve, int& failed);
// The bootstrap of one relation's fit (stars resampled by kind and anchor galaxy, every
// prior's centre redrawn).
void run_bootstrap(const FitOptions& o, RelationResult& rr, const FitData& data);
// Clusters are resampled as units (their members and their parallax together): the groups
// (indices into the anchors-then-clusters list) one resample draws, with repeats.
std::vector<int> draw_clusters(const ModelTerms& terms, Random& rng);
// Each cluster's parallax term counted as often as its cluster was drawn.
void weigh_cluster_parallaxes(const ModelTerms& terms, const std::vector<int>& drawn,
                              std::vector<FitData::GroupParallax>& groups);
// A cluster not drawn has no data in its resample: its modulus there is NaN, not a value, so
// its bootstrap spread comes from the resamples that drew it.
void forget_undrawn_clusters(const ModelTerms& terms, int anchor0, const std::vector<int>& drawn,
                             Eigen::VectorXd& theta);
// Adds restricted maximum likelihood's shift (RelationResult::restricted_shift) to every
// resample's parameters; nothing when the shift is empty.
void shift_resamples(const Eigen::VectorXd& shift, Eigen::MatrixXd& samples);
double percentile(std::vector<double> v, double q);
double standard_deviation(const std::vector<double>& v);
// The bootstrap error the fit reports: half the width of the resamples' central 68% interval,
// (p84 - p16) / 2, the standard deviation for a Gaussian (the percentile interval, Efron &
// Tibshirani 1993, ch. 13). Their standard deviation is not used: a few resamples that stray
// (a blend or outlier drawn thrice) inflated it for the optical sigma_int to 1.18-1.24 times
// the covariance error on the study's mocks, where the half-width is 1.07-1.14 and the
// estimates' own spread 1.05-1.26 (docs/simulation-history.md, "The bootstrap with the default
// model").
double bootstrap_spread(const std::vector<double>& v);
// Parameter j's finite resample values.
std::vector<double> bootstrap_column(const RelationResult& rr, int j);
std::vector<double> bootstrap_column(const Eigen::MatrixXd& samples, int j);
// Every bootstrap resample's parameters, one row per resample and parameter.
StarTable bootstrap_table(const FitResult& result);

// The calibrators used in any of the relations, each with its entries (fit_joint_run.cpp).
JointData joint_data_of(const FitOptions& o, const std::vector<RelationResult>& fits,
                        const StarTable& cat, const StarTable* coefficients);
// The joint fit's bootstrap (FitOptions::joint_resamples()): jr.data's stars resampled
// within their strata (parallax, known distance, each anchor galaxy; clusters whole), each sample
// solved by `solve` (nullopt: failed); fills jr.bootstrap and jr.bootstrap_failed. counted: each
// drawn star once with its number of draws as its weight (JointData::take_counted), for a
// likelihood that honours JointData::weight.
using JointSampleSolve =
    std::function<std::optional<Eigen::VectorXd>(const JointData& sample, Random& rng)>;
void run_joint_bootstrap(const FitOptions& o, JointResult& jr, const JointSampleSolve& solve,
                         bool counted);
// Counts jr.data's stars (too few: InputError) and warns without a COEFFS table.
void check_joint_sample(const FitOptions& o, const StarTable* coefficients, JointResult& jr);
// The hierarchical joint fit (joint_hierarchical.hpp) on those calibrators, started from the
// relations' own fits (fit_joint_hierarchical.cpp).
JointResult run_joint_hierarchical(const FitOptions& o, const std::vector<RelationResult>& fits,
                                   JointData data, const StarTable* coefficients);
// The relations fitted together (FitOptions::joint).
JointResult run_joint(const FitOptions& o, const std::vector<RelationResult>& fits,
                      const StarTable& cat, const StarTable* coefficients);

}  // namespace rungcal::fit_parts
