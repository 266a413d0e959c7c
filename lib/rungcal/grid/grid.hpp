// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "rungcal/deredden/deredden.hpp"
#include "rungcal/plfit/fit_stage.hpp"

namespace rungcal {

// One analysis choice changed from the baseline. Only the fields set are changed.
struct GridVariant {
  std::string name;                           // a row of the error budget
  std::string category;                       // shifts are summed in quadrature within a category
  std::optional<ExtinctionLaw> law;           // extinction law
  std::optional<double> r_v;                  // R_V
  std::optional<ZeroPointRecipe> zero_point;  // parallax zero-point recipe
  std::optional<double> zero_point_mas;       // its constant
  std::optional<double> max_ruwe;             // quality cut on RUWE (0: none)
  std::optional<LossKind> loss;               // robust loss
  std::optional<double> loss_scale;
  std::optional<FitSpace> space;         // fit space
  std::optional<bool> metallicity;       // the [Fe/H] term, every relation
  std::optional<double> min_log_period;  // period range, every relation
  std::optional<double> max_log_period;
  std::optional<InflationRecipe> inflation;  // parallax error inflation
  // The hierarchical fit's blend model (other spaces have none: the variant then warns and
  // refits unchanged). At sigma_int ~ 0.2 mag, blends within ~0.5 mag of a member cannot be told
  // from the members' bright tail, so the result leans on the component's start and shape
  // (docs/simulation-history.md, "The blend law near its start").
  std::optional<double> blend_min_mag;            // where the blend component starts (mag)
  std::optional<BlendComponent> blend_component;  // its brightening law
  // True when the variant changes the dereddened magnitudes (law or R_V).
  bool changes_extinction() const { return law.has_value() || r_v.has_value(); }
};

struct GridOptions {
  std::string catalog_path;     // ingested catalog (HDU CATALOG): every variant dereddens it
  std::string deredden_config;  // baseline deredden config
  std::string fit_config;       // baseline fit config
  std::string output_folder = "out/grid";  // grid.json and error_budget.csv
  int bootstrap = 0;  // bootstrap resamples per variant (overrides the fit config)
  int threads = 0;    // variants in parallel; 0: every core
  std::vector<GridVariant> variants;
  std::string config_file, config_sha256;

  // "" when usable, else "field: rule".
  std::string check() const;
};

// Reads [grid] and [[variant]] tables; unknown keys stop with rule "unknown_config_key".
GridOptions grid_options_from_file(const std::string& path);

// What the grid reads: its catalog, the baseline deredden and fit configs, and what those two
// stages read besides their own catalogs, which the grid's replaces (the band table, the
// zero-point tables: found by reading the two configs); what it writes: OUTPUT/grid.json and
// OUTPUT/error_budget.csv.
StageFiles declared_files(const GridOptions& options);
// OUTPUT/grid.json: the budget the report and apply read.
std::string grid_result_path(const GridOptions& options);
// OUTPUT/error_budget.csv: the budget for a person.
std::string grid_budget_csv_path(const GridOptions& options);

// The baseline and every variant, fitted; the shifts and the budget.
struct GridResult {
  FitResult baseline;
  // In the options' order. Under MPI, a fit another rank made carries only what the budget
  // reads: per relation its name, parameter names and modes, values and covariance.
  std::vector<FitResult> variants;
  // shift of a variant's parameter from the baseline's, and in units of the baseline's
  // covariance error: per relation, per parameter, per variant.
  nlohmann::json budget;  // docs/file-formats.md, "Systematics grid"
};

// Runs the baseline and the variants (in parallel, each deterministic) on one catalog;
// under MPI the variants are split across ranks. Writes nothing.
GridResult run_grid(const GridOptions& options);
// Runs and writes OUTPUT/grid.json and OUTPUT/error_budget.csv atomically (rank 0 only).
GridResult run_grid_files(const GridOptions& options);

// The budget as JSON: for each relation and parameter, the baseline value and error, each
// variant's shift (and shift / error), and per category the quadrature sum of its
// variants' shifts, and the total over categories.
nlohmann::json error_budget(const GridOptions& options, const GridResult& result);

}  // namespace rungcal
