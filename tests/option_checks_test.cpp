// SPDX-License-Identifier: MIT
// The options checks of every stage, table by table: each rule broken alone on a valid set of
// options (the demo's configs, or a minimal one), and the exact message it gives. A stage
// prefixes this message with its config file and key when it stops (exit 2, config_value);
// these tables hold the rule's own words, so a reworded or lost rule shows here.
#include <gtest/gtest.h>

#include <functional>
#include <limits>
#include <string>
#include <vector>

#include "rungcal/calibration/apply.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/deredden/deredden.hpp"
#include "rungcal/grid/grid.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/report/report.hpp"
#include "rungcal/report/site.hpp"
#include "rungcal/run/run.hpp"
#include "rungcal/simulate/simulate.hpp"
#include "rungcal/simulate/study.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// The pulsator classes as the messages list them (table/catalog_schema.hpp).
const std::string kClasses = "classical_cepheid, type2_cepheid, anomalous_cepheid, rr_lyrae, other";

template <class Options>
struct CheckCase {
  const char* broken;                  // what the case breaks, for the failure message
  std::function<void(Options&)> make;  // breaks one rule of a valid set
  std::string message;                 // the exact message of that rule
};

template <class Options>
void expect_messages(const Options& valid, const std::vector<CheckCase<Options>>& cases) {
  ASSERT_EQ(valid.check(), "") << "the base options must pass";
  for (const auto& c : cases) {
    Options o = valid;
    c.make(o);
    EXPECT_EQ(o.check(), c.message) << c.broken;
  }
}

std::string demo_config(const std::string& name) {
  return test::source_file("config/demo/" + name);
}

TEST(OptionChecks, Deredden) {
  using O = DereddenOptions;
  expect_messages<O>(
      deredden_options_from_file(demo_config("deredden.toml")),
      {{"input", [](O& o) { o.input_path.clear(); }, "input: required"},
       {"output", [](O& o) { o.output_path.clear(); }, "output: required"},
       {"bands_file", [](O& o) { o.bands_file.clear(); }, "bands_file: required"},
       {"r_v negative", [](O& o) { o.r_v = -1; }, "r_v: must be a positive number"},
       {"r_v not a number", [](O& o) { o.r_v = kNaN; }, "r_v: must be a positive number"},
       {"r_v implausible", [](O& o) { o.r_v = 9; },
        "r_v: must be 1.5 to 8 (measured sightlines span about 2 to 6)"},
       {"a_over_ebv negative", [](O& o) { o.a_over_ebv["V"] = -0.1; },
        "a_over_ebv.V: must be a non-negative number"}});
}

TEST(OptionChecks, Apply) {
  using O = ApplyOptions;
  O valid;
  valid.store = "store", valid.calibration = "c@latest", valid.relation = "W_VI";
  valid.targets_path = "targets.fits";
  expect_messages<O>(valid, {{"store", [](O& o) { o.store.clear(); }, "store: required"},
                             {"calibration", [](O& o) { o.calibration.clear(); },
                              "calibration: required (name@latest or name@N)"},
                             {"relation", [](O& o) { o.relation.clear(); }, "relation: required"},
                             {"targets", [](O& o) { o.targets_path.clear(); }, "targets: required"},
                             {"out", [](O& o) { o.output_path.clear(); }, "out: required"},
                             {"outlier_sigma", [](O& o) { o.outlier_sigma = 0; },
                              "outlier_sigma: must be a finite positive number"},
                             {"outlier_iterations", [](O& o) { o.outlier_iterations = 0; },
                              "outlier_iterations: must be at least 1"}});
}

TEST(OptionChecks, Grid) {
  using O = GridOptions;
  expect_messages<O>(
      grid_options_from_file(demo_config("grid.toml")),
      {{"catalog", [](O& o) { o.catalog_path.clear(); },
        "grid.catalog: required (an ingested catalog)"},
       {"deredden", [](O& o) { o.deredden_config.clear(); },
        "grid.deredden: required (the baseline deredden config)"},
       {"fit", [](O& o) { o.fit_config.clear(); }, "grid.fit: required (the baseline fit config)"},
       {"output", [](O& o) { o.output_folder.clear(); }, "grid.output: required"},
       {"bootstrap", [](O& o) { o.bootstrap = -1; }, "grid.bootstrap: must be 0 or more"},
       {"threads", [](O& o) { o.threads = -1; }, "grid.threads: must be 0 (every core) or more"},
       {"no variant", [](O& o) { o.variants.clear(); }, "variant: at least one [[variant]]"},
       {"variant named baseline", [](O& o) { o.variants[0].name = "baseline"; },
        "variant.name: required, and not \"baseline\""},
       {"variant named twice", [](O& o) { o.variants[1].name = o.variants[0].name; },
        "variant.name: '" + grid_options_from_file(demo_config("grid.toml")).variants[0].name +
            "' is used twice"},
       {"variant without category",
        [](O& o) { o.variants[0].name = "v", o.variants[0].category.clear(); },
        "variant.v.category: required"},
       {"variant r_v", [](O& o) { o.variants[0].name = "v", o.variants[0].r_v = 0.0; },
        "variant.v.r_v: must be positive"}});
}

TEST(OptionChecks, ReportAndSite) {
  using R = ReportOptions;
  R report;
  report.store = "store", report.calibrations = {"c@latest"};
  expect_messages<R>(
      report, {{"store", [](R& o) { o.store.clear(); }, "store: required"},
               {"calibration", [](R& o) { o.calibrations.clear(); }, "calibration: at least one"},
               {"out", [](R& o) { o.out_dir.clear(); }, "out: required"}});
  using S = SiteOptions;
  S site;
  site.store = "store", site.calibration = "c", site.out_dir = "site";
  expect_messages<S>(
      site, {{"store", [](S& o) { o.store.clear(); }, "store: required"},
             {"calibration", [](S& o) { o.calibration = "-c"; },
              "calibration: letters, digits, '-', '_' and '.', starting with a letter or digit"},
             {"out", [](S& o) { o.out_dir.clear(); }, "out: required"},
             {"drift_alarm_sigma", [](S& o) { o.drift_alarm_sigma = 0; },
              "drift_alarm_sigma: must be positive"},
             {"max_versions", [](S& o) { o.max_versions = 0; }, "max_versions: at least 1"}});
}

TEST(OptionChecks, Publish) {
  using O = PublishOptions;
  O valid;
  valid.store = "store", valid.name = "halden-peak", valid.fit_path = "fit.json";
  expect_messages<O>(
      valid, {{"store", [](O& o) { o.store.clear(); }, "store: required"},
              {"name", [](O& o) { o.name = "a b"; },
               "name: letters, digits, '-', '_' and '.', starting with a letter or digit"},
              {"fit", [](O& o) { o.fit_path.clear(); }, "fit: required (a rungcal-fit result)"},
              {"lock_wait", [](O& o) { o.lock_wait_seconds = -1; },
               "lock_wait_seconds: must be 0 or more"}});
}

TEST(OptionChecks, Run) {
  using O = RunOptions;
  expect_messages<O>(
      run_options_from_file(demo_config("pipeline.toml")),
      {{"folder", [](O& o) { o.folder.clear(); }, "run.folder: required"},
       {"store", [](O& o) { o.store.clear(); }, "run.store: required"},
       {"calibration", [](O& o) { o.calibration.clear(); },
        "run.calibration: required (the name versions are published under)"},
       {"calibration name", [](O& o) { o.calibration = ".x"; },
        "run.calibration: letters, digits, '-', '_' and '.', starting with a letter or digit"},
       {"ingest", [](O& o) { o.ingest_config.clear(); }, "ingest.config: required"},
       {"deredden", [](O& o) { o.deredden_config.clear(); }, "deredden.config: required"},
       {"fit", [](O& o) { o.fit_config.clear(); }, "fit.config: required"},
       {"lock_wait", [](O& o) { o.lock_wait_seconds = -1; },
        "run.lock_wait: must be 0 or more seconds"},
       {"drift_alarm_sigma", [](O& o) { o.drift_alarm_sigma = 0; },
        "run.drift_alarm_sigma: must be positive"},
       {"apply without targets", [](O& o) { o.targets_ingest_config.clear(); },
        "apply: relation needs targets_ingest and targets_deredden"},
       {"skip categories without a grid", [](O& o) { o.grid_config.clear(); },
        "apply.grid_skip_categories: needs a [grid] stage, whose budget it edits"}});
}

TEST(OptionChecks, LightCurve) {
  using O = LightCurveOptions;
  const O valid = lightcurve_options_from_file(demo_config("lightcurve.toml"));
  expect_messages<O>(
      valid,
      {{"path", [](O& o) { o.source.path.clear(); }, "source.path: required"},
       {"text source", [](O& o) { o.source.text.max_field_bytes = 0; },
        "source.max_field_bytes: must be at least 1"},
       {"column", [](O& o) { o.err_column.clear(); },
        "columns: star, time, band, mag and mag_err must name input columns"},
       {"bands_file", [](O& o) { o.bands_file.clear(); }, "bands_file: required"},
       {"min_period", [](O& o) { o.min_period_d = 0; }, "search.min_period: must be positive"},
       {"max_period", [](O& o) { o.max_period_d = o.min_period_d; },
        "search.max_period: must exceed min_period"},
       {"oversampling", [](O& o) { o.oversampling = 0.5; },
        "search.oversampling: must be at least 1"},
       {"harmonics", [](O& o) { o.search_harmonics = 7; }, "search.harmonics: must be 1 to 6"},
       {"max_order", [](O& o) { o.max_order = 13; }, "model.max_order: must be 1 to 12"},
       {"min_dof", [](O& o) { o.min_dof = 0; }, "model.min_dof: must be at least 1"},
       {"min_points", [](O& o) { o.min_points = 5; },
        "model.min_points: must leave min_dof degrees of freedom for a first-order model (>= 3 + "
        "min_dof)"},
       {"max_false_alarm", [](O& o) { o.max_false_alarm = 0; },
        "flags.max_false_alarm: must be in (0, 1]"},
       {"max_phase_gap", [](O& o) { o.max_phase_gap = 1; },
        "flags.max_phase_gap: must be in (0, 1)"},
       {"competing_peak_ratio", [](O& o) { o.competing_peak_ratio = 1.5; },
        "flags.competing_peak_ratio: must be in (0, 1]"},
       {"threads", [](O& o) { o.threads = -1; }, "threads: must be 0 (every core) or positive"},
       {"output", [](O& o) { o.output_path.clear(); }, "output.path: required"}});
  // Per-star files.
  O files = valid;
  files.files.name_pattern = "{band}/{star}.dat";
  expect_messages<O>(
      files, {{"no {star}", [](O& o) { o.files.name_pattern = "{band}.dat"; },
               "source.name_pattern: must hold {star}, where the star id sits in each file name"},
              {"leading slash", [](O& o) { o.files.name_pattern = "/{star}.dat"; },
               "source.name_pattern: the end of each file's path, e.g. \"{star}.dat\" or "
               "\"{band}/{star}.dat\" (no leading or trailing '/', no '//' or '..')"},
              {"{star} twice", [](O& o) { o.files.name_pattern = "{star}/{star}.dat"; },
               "source.name_pattern: {star} more than once"},
              {"band and {band}", [](O& o) { o.files.band = "V"; },
               "source.band: not with {band} in name_pattern (the band comes from the name)"},
              {"time offset", [](O& o) { o.files.time_offset_d = kNaN; },
               "source.time_offset_d: must be a finite number of days"},
              {"gaia layout", [](O& o) { o.layout = SourceLayout::kGaiaEpoch; },
               "source.name_pattern: not with layout \"gaia_epoch\" (each row names its source)"}});
  // Gaia epoch photometry.
  O gaia = valid;
  gaia.layout = SourceLayout::kGaiaEpoch, gaia.time_scale = TimeScale::kBjdTcb;
  expect_messages<O>(gaia,
                     {{"time scale", [](O& o) { o.time_scale = TimeScale::kBjdTdb; },
                       "source.time_scale: Gaia epoch times are BJD in TCB: leave it out or say "
                       "\"bjd_tcb\""},
                      {"no band", [](O& o) { o.gaia_bands.clear(); },
                       "source.bands: name at least one of G, BP, RP"},
                      {"unknown band",
                       [](O& o) {
                         o.gaia_bands = {"G", "V"};
                       },
                       "source.bands: 'V' is not one of G, BP, RP"},
                      {"band twice",
                       [](O& o) {
                         o.gaia_bands = {"RP", "G", "RP"};
                       },
                       "source.bands: RP more than once"}});
}

TEST(OptionChecks, TextSource) {
  using O = TextReadOptions;
  expect_messages<O>(
      O{}, {{"max_field_bytes", [](O& o) { o.max_field_bytes = 0; },
             "max_field_bytes: must be at least 1"},
            {"headerless without names", [](O& o) { o.has_header = false; },
             "column_names: required when the file has no header line (has_header = false)"},
            {"a name twice",
             [](O& o) {
               o.column_names = {"t", "m", "t"};
             },
             "column_names: 't' is named twice"}});
}

TEST(OptionChecks, Ingest) {
  using O = IngestOptions;
  expect_messages<O>(
      ingest_options_from_file(demo_config("ingest.toml")),
      {{"path", [](O& o) { o.input_path.clear(); }, "source.path: required"},
       {"catalog", [](O& o) { o.catalog_path.clear(); }, "output.catalog: required"},
       {"chunk_rows", [](O& o) { o.chunk_rows = 0; }, "source.chunk_rows: must be at least 1"},
       {"id", [](O& o) { o.quantities.erase("id"); },
        "columns.id: required (which input column identifies each star, or a preset)"},
       {"period", [](O& o) { o.quantities.erase("period"); },
        "columns.period: required (a period or log-period column, or a [lightcurves] join that "
        "supplies the periods)"},
       {"mode", [](O& o) { o.quantities.erase("mode"); },
        "columns.mode: required (a column, or mode = { value = \"fundamental\" } for all stars)"},
       {"class", [](O& o) { o.quantities.erase("pulsator_class"); },
        "columns.pulsator_class: required (a column, or { value = \"classical_cepheid\" })"},
       {"bands", [](O& o) { o.bands.clear(); },
        "bands: at least one band is required (or a [lightcurves] join that supplies the "
        "magnitudes)"},
       {"magnitude range", [](O& o) { o.magnitude_min = o.magnitude_max; },
        "validate.magnitude_range: the minimum must be below the maximum"},
       {"ebv range", [](O& o) { o.ebv_min = o.ebv_max; },
        "validate.ebv_range: the minimum must be below the maximum"},
       {"parallax max", [](O& o) { o.parallax_abs_max = 0; },
        "validate.parallax_max_mas: must be positive"},
       {"parallax error max", [](O& o) { o.parallax_err_max = 0; },
        "validate.parallax_error_max_mas: must be positive"},
       {"magnitude error max", [](O& o) { o.magnitude_err_max = 0; },
        "validate.magnitude_error_max: must be positive"},
       {"feh range", [](O& o) { o.feh_range.min = o.feh_range.max; },
        "validate.feh_range: the minimum must be below the maximum"},
       {"period range", [](O& o) { o.period_range.min = 0; },
        "validate.period_range_d: must be [min, max] days with 0 < min < max"},
       {"band named twice",
        [](O& o) {
          auto twice = o.bands.front();
          twice.band = "Vx";
          o.bands.push_back(twice), o.bands.push_back(twice);
        },
        "bands.Vx: named twice"},
       {"band name with a space", [](O& o) { o.bands.front().band = "V x"; },
        "bands.V x: a band name must be non-empty without spaces or commas"},
       {"class period range: unknown class",
        [](O& o) {
          o.class_period_range["mira"] = {1, 2};
        },
        "validate.class_period_range_d.mira: not a pulsator class (known: " + kClasses + ")"},
       {"class period range: empty",
        [](O& o) {
          o.class_period_range["rr_lyrae"] = {1, 1};
        },
        "validate.class_period_range_d.rr_lyrae: must be [min, max] days with 0 < min < max"},
       {"class parallax limit: unknown class",
        [](O& o) { o.class_limits.parallax_max_mas["mira"] = 10; },
        "validate.class_parallax_max_mas.mira: not a pulsator class (known: " + kClasses + ")"},
       {"class parallax limit: not positive",
        [](O& o) { o.class_limits.parallax_max_mas["rr_lyrae"] = 0; },
        "validate.class_parallax_max_mas.rr_lyrae: must be positive (mas)"},
       {"class known periods: unknown class",
        [](O& o) {
          o.class_limits.period_d["mira"] = {1, 2};
        },
        "validate.class_period_known_range_d.mira: not a pulsator class (known: " + kClasses + ")"},
       {"class known periods: empty",
        [](O& o) {
          o.class_limits.period_d["rr_lyrae"] = {0, 1};
        },
        "validate.class_period_known_range_d.rr_lyrae: must be [min, max] days with 0 < min < "
        "max"},
       {"median parallax range", [](O& o) { o.unit_checks.parallax_median_min_mas = 0; },
        "validate.parallax_median_range_mas: must be [min, max] mas with 0 < min < max"},
       {"median period range",
        [](O& o) {
          o.unit_checks.class_period_median_d["rr_lyrae"] = {1, 0.5};
        },
        "validate.class_period_median_range_d.rr_lyrae: must be [min, max] days with 0 < min < "
        "max"},
       {"median absolute magnitude range",
        [](O& o) {
          o.unit_checks.class_absolute_magnitude_median["rr_lyrae"] = {1, 1};
        },
        "validate.class_absolute_magnitude_median_range.rr_lyrae: must be [min, max] mag with min "
        "< max"}});
}

TEST(OptionChecks, Fit) {
  using O = FitOptions;
  O valid;
  valid.input_path = "catalog.fits";
  RelationOptions rel;
  rel.name = rel.band = "W_VI";
  valid.relations = {rel};
  expect_messages<O>(
      valid,
      {{"input", [](O& o) { o.input_path.clear(); }, "fit.input: required"},
       {"output", [](O& o) { o.output_path.clear(); }, "fit.output: required"},
       {"relations", [](O& o) { o.relations.clear(); },
        "relation: at least one [[relation]] is required"},
       {"loss_scale", [](O& o) { o.loss_scale = 0; }, "fit.loss_scale: must be positive"},
       {"clip_sigma", [](O& o) { o.clip_sigma = -1; },
        "fit.clip_sigma: must be 0 (off) or positive"},
       {"bootstrap", [](O& o) { o.bootstrap = -1; },
        "fit.bootstrap: must be 0 to 100000 resamples"},
       {"zero point tables", [](O& o) { o.zero_point = ZeroPointRecipe::kLindegren2021; },
        "fit.zero_point_table_5p: both Lindegren et al. 2021 tables are required for that "
        "recipe"},
       {"inflation factor",
        [](O& o) { o.inflation = InflationRecipe::kConstant, o.inflation_factor = 0; },
        "fit.inflation_factor: must be positive"},
       {"robust loss in the hierarchical model", [](O& o) { o.loss = LossKind::kHuber; },
        "fit.loss: the hierarchical likelihood takes outliers as a mixture component "
        "(outlier_fraction); a robust loss applies to space = \"parallax\", \"magnitude\" or "
        "\"abl\""},
       {"scatter prior outside the hierarchical model",
        [](O& o) { o.space = FitSpace::kParallax, o.scatter.mode = ParamMode::kPrior; },
        "fit.scatter: free or fixed only, except in the hierarchical model"},
       {"prior without a width",
        [](O& o) {
          o.offset = {ParamMode::kPrior, -0.01, 0, true};
        },
        "fit.offset: a prior needs a finite sigma > 0"},
       {"value outside its domain",
        [](O& o) {
          o.scatter = {ParamMode::kFixed, -0.1, 0, true};
        },
        "fit.scatter: -0.1 is outside the parameter's domain (>= 0, below inf)"},
       {"histogram step", [](O& o) { o.hierarchical.histogram_step = 3; },
        "fit.histogram_step_mag: must be 0.1 to 2 mag"},
       {"histogram smoothing", [](O& o) { o.hierarchical.histogram_walk_sigma = 0.01; },
        "fit.histogram_smoothing: must be above 0.05 and at most 100"},
       {"histogram kernel", [](O& o) { o.hierarchical.histogram_kernel = 0.5; },
        "fit.histogram_kernel_fraction: must be 0.75 to 1 (of the step)"},
       {"histogram margin", [](O& o) { o.hierarchical.histogram_margin = 6; },
        "fit.histogram_margin_mag: must be 0 to 5 mag"},
       {"quadrature nodes", [](O& o) { o.hierarchical.quadrature_nodes = 500; },
        "fit.quadrature_nodes: must be 8 to 128"},
       {"blend_min_mag", [](O& o) { o.hierarchical.blend_min_mag = 6; },
        "fit.blend_min_mag: must be 0 to 5 mag"},
       {"outlier_parallax_factor", [](O& o) { o.outlier_factor.value = 2.5; },
        "fit.outlier_parallax_factor: 2.5 is outside the parameter's domain (> 3, below 1000000)"},
       {"joint with one relation", [](O& o) { o.joint = true; },
        "fit.joint: needs two or more [[relation]]"},
       {"joint in magnitude space",
        [](O& o) {
          o.relations.push_back(o.relations[0]), o.relations[1].name = "Ks";
          o.joint = true, o.space = FitSpace::kMagnitude;
        },
        "fit.joint: the joint fit works in parallax space"},
       {"GLS joint correlation",
        [](O& o) { o.space = FitSpace::kParallax, o.joint_scatter_correlation.value = 1.0; },
        "fit.joint_scatter_correlation: must be in [0, 1) (the GLS joint fit)"},
       {"shared slope without joint", [](O& o) { o.joint_shared_slope = true; },
        "fit.joint_shared_slope: needs joint = true"},
       {"shared slope, pivots differ",
        [](O& o) {
          o.relations.push_back(o.relations[0]), o.relations[1].pivot_log_period = 0.5;
          o.joint = true, o.joint_shared_slope = true;
        },
        "fit.joint_shared_slope: every relation needs the same pivot_log_period"},
       {"relation without band", [](O& o) { o.relations[0].band.clear(); },
        "relation.band: required"},
       {"pivot", [](O& o) { o.relations[0].pivot_log_period = 11; },
        "relation.pivot_log_period: must be finite, |log P0| <= 10"},
       {"break", [](O& o) { o.relations[0].break_log_period = 11.0; },
        "relation.break_log_period: must be finite, |log Pb| <= 10"},
       {"alpha fixed outside the hierarchical model",
        [](O& o) { o.space = FitSpace::kParallax, o.relations[0].alpha.mode = ParamMode::kFixed; },
        "relation.alpha: fixed or prior only in the hierarchical model"},
       {"gamma fixed outside the hierarchical model",
        [](O& o) { o.space = FitSpace::kParallax, o.relations[0].gamma.mode = ParamMode::kFixed; },
        "relation.gamma: fixed or prior only in the hierarchical model"},
       {"period range", [](O& o) { o.relations[0].min_log_period = o.relations[0].max_log_period; },
        "relation.log_period_range: minimum must be below maximum"},
       {"unknown mode", [](O& o) { o.relations[0].modes = {"second_overtone_x"}; },
        "relation.modes: unknown mode 'second_overtone_x'"},
       {"unknown class", [](O& o) { o.relations[0].classes = {"mira"}; },
        "relation.classes: unknown class 'mira'"},
       {"anchor without an error",
        [](O& o) {
          o.anchors.push_back({"Cloud", 18.5, 0});
        },
        "anchor.mu_err: must be positive (Cloud)"}});
}

TEST(OptionChecks, Simulate) {
  using O = SimulateOptions;
  expect_messages<O>(
      simulate_options_from_file(test::source_file("config/simulate_demo.toml")),
      {{"calibrators", [](O& o) { o.n_calibrators = 2; }, "n_calibrators: at least 3"},
       {"targets", [](O& o) { o.n_targets = 0; }, "n_targets: at least 1"},
       {"light-curve stars", [](O& o) { o.n_lightcurve_stars = o.n_calibrators + 1; },
        "n_lightcurve_stars: between 0 and n_calibrators"},
       {"fraction", [](O& o) { o.far_fraction = 1.5; }, "fractions: each between 0 and 1"},
       {"r_v", [](O& o) { o.r_v = 0; }, "r_v: must be positive"},
       {"relations", [](O& o) { o.relations.clear(); }, "relations: at least one band"},
       {"light-curve band", [](O& o) { o.lightcurve_bands = {"U"}; },
        "lightcurve_bands: 'U' has no relation"},
       {"target band", [](O& o) { o.target_bands = {"U"}; }, "target_bands: 'U' has no relation"},
       {"cluster name", [](O& o) { o.clusters[0].name = o.field_group; },
        "cluster.name: required, and not the field_group"},
       {"cluster mu", [](O& o) { o.clusters[0].mu = 17; },
        "cluster.mu: must be 5 to 16 (100 pc to 16 kpc)"},
       {"cluster members", [](O& o) { o.clusters[0].members = 0; },
        "cluster.members: must be 1 to 200"},
       {"cluster parallax error", [](O& o) { o.cluster_parallax_error_mas = 0; },
        "cluster_parallax_error_mas: must be positive"},
       {"anchor name", [](O& o) { o.anchors[0].name = o.clusters[0].name; },
        "anchor.name: required, and neither the field_group nor a cluster's"},
       {"anchor mu", [](O& o) { o.anchors[0].mu = 12; },
        "anchor.mu: must be 16 to 26 (16 kpc to 16 Mpc)"},
       {"anchor members", [](O& o) { o.anchors[0].members = 0; },
        "anchor.members: must be 1 to 2000"},
       {"anchor mu_err", [](O& o) { o.anchors[0].mu_err = 0; },
        "anchor.mu_err: must be above 0 and below 1 mag"},
       {"anchor ebv", [](O& o) { o.anchors[0].ebv = 2; }, "anchor.ebv: must be 0 to 1 mag"},
       {"anchor correlation", [](O& o) { o.anchor_correlation = 1; },
        "anchor_correlation: must be 0 to below 1 (a shared systematic)"}});
}

TEST(OptionChecks, MockScenarioAndStudy) {
  using M = MockScenario;
  expect_messages<M>(
      M{},
      {{"stars", [](M& o) { o.stars = 2; }, "stars: at least 3"},
       {"fraction", [](M& o) { o.blend_fraction = 1; }, "fractions: each in [0, 1)"},
       {"scatter correlation", [](M& o) { o.scatter_correlation = 1; },
        "scatter_correlation: in [0, 1)"},
       {"further relation named X", [](M& o) { o.more_relations = {MockRelation{"X"}}; },
        "more_relations: a name other than X, sigma_int >= 0, companion_colour > 0"},
       {"clusters", [](M& o) { o.clusters = -1; },
        "clusters: 0 to 1000 clusters of 1 to 1000 members"},
       {"cluster parallax error", [](M& o) { o.cluster_parallax_error_mas = 0; },
        "cluster_parallax_error_mas: must be positive"},
       {"anchors", [](M& o) { o.anchors = 21; }, "anchors: 0 to 20 galaxies of 1 to 10000 members"},
       {"anchor error", [](M& o) { o.anchor_mu_error = 0; }, "anchor_mu_error: must be positive"},
       {"anchor correlation", [](M& o) { o.anchor_correlation = -0.1; },
        "anchor_correlation: in [0, 1)"},
       {"errors", [](M& o) { o.mag_error = 0; },
        "errors: sigma_int, feh_error, ebv_error >= 0; mag_error, feh_spread, "
        "parallax_error_scale > 0"}});
  using S = StudyOptions;
  S study;
  RelationOptions rel;
  rel.name = rel.band = "X";
  study.fit.relations = {rel};
  expect_messages<S>(
      study, {{"mocks", [](S& o) { o.mocks = 1; }, "mocks: at least 2"},
              {"scenario", [](S& o) { o.scenario.stars = 0; }, "scenario.stars: at least 3"},
              {"relations", [](S& o) { o.fit.relations.push_back(o.fit.relations[0]); },
               "fit: one relation per mock relation (X, then more_relations in order)"},
              {"joint", [](S& o) { o.fit.joint = true; },
               "fit.joint: exactly when the mocks have more relations"},
              // The fit's own rules, once for the study rather than as every mock's failure.
              {"fit option", [](S& o) { o.fit.outlier_factor.value = 2.0; },
               "fit.outlier_parallax_factor: 2 is outside the parameter's domain (> 3, below "
               "1000000)"}});
}

}  // namespace
}  // namespace rungcal
