// SPDX-License-Identifier: MIT
#include "rungcal/run/run.hpp"

#include <filesystem>
#include <functional>
#include <optional>
#include <set>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/calibration/apply_products.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/fault.hpp"
#include "rungcal/core/file_lock.hpp"
#include "rungcal/deredden/deredden.hpp"
#include "rungcal/grid/grid.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/report/report.hpp"
#include "rungcal/run/run_parts.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace run_parts {

std::string in_folder(const RunOptions& o, const std::string& name) {
  return (fs::path(o.folder) / name).string();
}

}  // namespace run_parts

using namespace run_parts;

namespace {

// The version 'latest' names, and the newest one before it that was not withdrawn (what
// the report compares), oldest first; empty when nothing is published. Downstream stages use
// what 'latest' names, never simply the highest number: a rollback is honoured.
std::vector<std::string> latest_versions(const RunOptions& o) {
  const std::optional<int> latest = latest_version(o.store, o.calibration);
  if (!latest) return {};
  std::set<int> withdrawn;
  for (const auto& w : withdrawn_versions(o.store, o.calibration)) withdrawn.insert(w.version);
  std::vector<std::string> refs;
  for (int v : calibration_versions(o.store, o.calibration))
    if (v < *latest && !withdrawn.count(v)) refs.assign({fmt::format("{}@{}", o.calibration, v)});
  refs.push_back(fmt::format("{}@{}", o.calibration, *latest));
  return refs;
}

// Refuses an [apply] relation the fit does not make, before any stage runs.
void check_apply_relation(const RunOptions& o, const FitOptions& fit) {
  if (o.apply_relation.empty()) return;
  std::string names;
  for (const auto& r : fit.relations) {
    if (r.name == o.apply_relation) return;
    names += (names.empty() ? "" : ", ") + r.name;
  }
  throw InputError({o.config_file, {}, "apply.relation", "line", "key"}, "unknown_relation",
                   fmt::format("'{}' is not a relation the fit config {} makes (it makes: {})",
                               o.apply_relation, o.fit_config, names));
}

}  // namespace

std::string RunOptions::check() const {
  if (folder.empty()) return "run.folder: required";
  if (store.empty()) return "run.store: required";
  if (calibration.empty())
    return "run.calibration: required (the name versions are published under)";
  if (auto why = check_calibration_name(calibration); !why.empty())
    return "run.calibration: " + why.substr(6);
  if (ingest_config.empty()) return "ingest.config: required";
  if (deredden_config.empty()) return "deredden.config: required";
  if (fit_config.empty()) return "fit.config: required";
  if (!(lock_wait_seconds >= 0)) return "run.lock_wait: must be 0 or more seconds";
  if (!(drift_alarm_sigma > 0)) return "run.drift_alarm_sigma: must be positive";
  if (!apply_relation.empty() && (targets_ingest_config.empty() || targets_deredden_config.empty()))
    return "apply: relation needs targets_ingest and targets_deredden";
  if (!apply_grid_skip_categories.empty() && grid_config.empty())
    return "apply.grid_skip_categories: needs a [grid] stage, whose budget it edits";
  return "";
}

RunOptions run_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  ConfigSection root = c.root();
  RunOptions o;
  o.config_file = path;
  o.config_sha256 = c.sha256();
  auto run = root.section("run");
  if (!run)
    throw InputError({path, {}, "run", "line", "key"}, "config_missing_key",
                     "a [run] table is required");
  o.folder = c.resolve_path(run->require_string("folder"));
  o.store = run->has("store") ? c.resolve_path(*run->get_string("store"))
                              : (fs::path(o.folder) / "store").string();
  o.calibration = run->require_string("calibration");
  o.lock_wait_seconds = run->number_or("lock_wait", o.lock_wait_seconds);
  o.drift_alarm_sigma = run->number_or("drift_alarm_sigma", o.drift_alarm_sigma);
  o.republish_withdrawn = run->bool_or("republish_withdrawn", false);
  o.site = run->bool_or("site", true);
  // Read as given and checked before they become sizes: -1 was a huge count (issue 15).
  const double log_mb = run->number_or("log_max_mb", 5.0);
  if (!(log_mb > 0 && log_mb <= 1e6))
    run->fail("log_max_mb", "must be a size in megabytes above 0 and at most 1e6");
  o.log_rotate_bytes = static_cast<std::size_t>(log_mb * (1 << 20));
  const std::int64_t log_files = run->integer_or("log_files", 5);
  if (log_files < 0 || log_files > 1000)
    run->fail("log_files",
              fmt::format("must be 0 to 1000 old log files to keep, not {}", log_files));
  o.log_files = static_cast<std::size_t>(log_files);
  auto stage_config = [&](const char* name, std::string& out) {
    if (auto s = root.section(name)) out = c.resolve_path(s->require_string("config"));
  };
  stage_config("lightcurve", o.lightcurve_config);
  stage_config("ingest", o.ingest_config);
  if (auto s = root.section("ingest"))
    if (auto in = s->get_string("input")) o.ingest_input = c.resolve_path(*in);
  stage_config("deredden", o.deredden_config);
  stage_config("fit", o.fit_config);
  if (auto s = root.section("fit"); s && s->has("bootstrap")) {
    // Checked here, not passed on: -5 used to mean "keep the fit config's" silently.
    const std::int64_t b = s->integer_or("bootstrap", 0);
    if (b < 0 || b > kMaxBootstrap)
      s->fail("bootstrap", fmt::format("must be 0 to {} resamples, not {}", kMaxBootstrap, b));
    o.fit_bootstrap = static_cast<int>(b);
  }
  stage_config("grid", o.grid_config);
  if (auto s = root.section("report")) {
    o.report = s->bool_or("enabled", true);
    if (auto w = s->get_string("figure_width")) {
      const auto width = kFigureWidthNames.parse(*w);
      if (!width)
        s->fail("figure_width", "must be one of: " + std::string(kFigureWidthNames.choices()));
      o.report_figure_width = *width;
    }
    if (auto e = s->get_string("table_errors")) {
      const auto errors = kTableErrorsNames.parse(*e);
      if (!errors)
        s->fail("table_errors", "must be one of: " + std::string(kTableErrorsNames.choices()));
      o.report_table_errors = *errors;
    }
  }
  if (auto s = root.section("apply")) {
    o.apply_relation = s->require_string("relation");
    o.apply_grid_skip_categories =
        s->get_string_list("grid_skip_categories").value_or(std::vector<std::string>{});
    o.targets_ingest_config = c.resolve_path(s->require_string("targets_ingest"));
    o.targets_deredden_config = c.resolve_path(s->require_string("targets_deredden"));
  }
  c.check_unknown_keys();
  throw_if_invalid(o.check(), path);
  check_run_folder(o, false);
  return o;
}

void check_run_folder(const RunOptions& o, bool create) {
  std::error_code ec;
  const fs::file_status st = fs::status(o.folder, ec);
  if (fs::exists(st) && !fs::is_directory(st))
    throw InputError({o.config_file, {}, "run.folder", "line", "key"}, "run_folder_not_a_folder",
                     fmt::format("'{}' exists and is not a folder", o.folder));
  if (!create) return;
  fs::create_directories(fs::path(o.folder) / "logs", ec);
  if (ec)
    throw WriteError({o.folder, {}, {}}, "cannot create the run folder: " + errno_text(ec.value()));
}

namespace {

// Every stage's options, read and checked from the pipeline config's stage configs, with
// the run folder's product paths filled in. Reading writes nothing.
struct StageOptions {
  std::optional<LightCurveOptions> lc_opt;
  IngestOptions ingest;
  DereddenOptions deredden;
  FitOptions fit;
  std::optional<GridOptions> grid;
  std::optional<IngestOptions> t_ingest;
  std::optional<DereddenOptions> t_deredden;

  explicit StageOptions(const RunOptions& o) {
    if (!o.lightcurve_config.empty()) {
      lc_opt = lightcurve_options_from_file(o.lightcurve_config);
      lc_opt->output_path = in_folder(o, "lightcurves.fits");
      lc_opt->summary_csv_path = in_folder(o, "lightcurves.csv");
    }
    ingest = ingest_options_from_file(o.ingest_config);
    if (!o.ingest_input.empty()) ingest.input_path = o.ingest_input;
    ingest.catalog_path = in_folder(o, "catalog.fits");
    ingest.rejects_csv_path = in_folder(o, "catalog_rejects.csv");
    if (lc_opt) ingest.lightcurves.summary_path = lc_opt->output_path;
    deredden = deredden_options_from_file(o.deredden_config);
    deredden.input_path = ingest.catalog_path;
    deredden.output_path = in_folder(o, "catalog_dereddened.fits");
    fit = fit_options_from_file(o.fit_config);
    fit.input_path = deredden.output_path;
    fit.output_path = in_folder(o, "fit.json");
    fit.residuals_path = in_folder(o, "fit_residuals.fits");
    // The run's count is every bootstrap's, the joint fit's too.
    if (o.fit_bootstrap >= 0) fit.bootstrap = o.fit_bootstrap, fit.joint_bootstrap = -1;
    check_apply_relation(o, fit);  // before anything is written (issue 15)
    if (!o.grid_config.empty()) {
      grid = grid_options_from_file(o.grid_config);
      grid->catalog_path = ingest.catalog_path;
      grid->deredden_config = o.deredden_config;
      grid->fit_config = o.fit_config;
      grid->output_folder = in_folder(o, "grid");
    }
    if (!o.apply_relation.empty()) {
      t_ingest = ingest_options_from_file(o.targets_ingest_config);
      t_ingest->catalog_path = in_folder(o, "targets.fits");
      t_ingest->rejects_csv_path = in_folder(o, "targets_rejects.csv");
      t_deredden = deredden_options_from_file(o.targets_deredden_config);
      t_deredden->input_path = t_ingest->catalog_path;
      t_deredden->output_path = in_folder(o, "targets_dereddened.fits");
    }
  }
};

// The chain under the run lock; held_lock says whether the lock was taken before a throw.
RunOutcome run_chain(const RunOptions& o, bool& held_lock);

}  // namespace

void check_pipeline(const RunOptions& o) {
  throw_if_invalid(o.check(), o.config_file);
  StageOptions checked(o);
}

RunOutcome run_pipeline(const RunOptions& o) {
  bool held_lock = false;
  try {
    return run_chain(o, held_lock);
  } catch (const std::exception& e) {
    // Recorded only under the lock: a run that found another one running writes nothing.
    const int code = dynamic_cast<const WriteError*>(&e) ? static_cast<int>(ExitCode::kCannotWrite)
                     : dynamic_cast<const InputError*>(&e)
                         ? static_cast<int>(ExitCode::kBadInput)
                         : static_cast<int>(ExitCode::kInternalError);
    if (held_lock) {
      try {
        record_run(o, code, fmt::format("rungcal-run: stopped: {}", e.what()));
      } catch (const std::exception& again) {
        spdlog::warn("could not record the failed run in run_history.json: {}", again.what());
      }
    }
    throw;
  }
}

namespace {

RunOutcome run_chain(const RunOptions& o, bool& held_lock) {
  throw_if_invalid(o.check(), o.config_file);
  // Every stage config is read (and checked) before anything runs or is locked: a typo
  // stops the run at once, not halfway.
  StageOptions so(o);
  check_run_folder(o);
  auto& [lc_opt, ingest, deredden, fit, grid, t_ingest, t_deredden] = so;

  FileLock lock(in_folder(o, ".run.lock"), o.lock_wait_seconds, "another rungcal-run");
  held_lock = true;
  if (lock.waited()) spdlog::warn("started after waiting for another run to finish");
  RunState state(in_folder(o, "run_state.json"));
  RunOutcome outcome;

  // The chain: each stage's config, settings and work; its files are its own declaration.
  std::vector<Stage> stages;
  if (lc_opt)
    stages.push_back({"lightcurve", o.lightcurve_config, "",
                      [&] { return declared_files(*lc_opt); },
                      [&] { write_lightcurve_products(run_lightcurves(*lc_opt), *lc_opt); }});
  stages.push_back({"ingest", o.ingest_config, "", [&] { return declared_files(ingest); },
                    [&] { note_refusals(ingest_catalog_file(ingest), ingest, outcome); }});
  stages.push_back({"deredden", o.deredden_config, "", [&] { return declared_files(deredden); },
                    [&] { deredden_catalog_file(deredden); }});
  stages.push_back({"fit", o.fit_config, fmt::format("bootstrap={}", fit.bootstrap),
                    [&] { return declared_files(fit); },
                    [&] { spdlog::info("fit:\n{}", fit_summary(fit_catalog_file(fit))); }});
  if (grid)
    stages.push_back({"grid", o.grid_config, "", [&] { return declared_files(*grid); },
                      [&] { run_grid_files(*grid); }});
  PublishOptions publish;
  publish.store = o.store;
  publish.name = o.calibration;
  publish.fit_path = fit.output_path;
  publish.residuals_path = fit_residuals_path(fit);
  publish.config_path = o.fit_config;
  publish.lock_wait_seconds = o.lock_wait_seconds;
  publish.republish_withdrawn = o.republish_withdrawn;
  stages.push_back({"publish", "",
                    fmt::format("store={} name={} republish_withdrawn={}", o.store, o.calibration,
                                o.republish_withdrawn),
                    [&] { return declared_files(publish); },
                    [&] {
                      const PublishOutcome p = publish_calibration(publish);
                      if (!p.created) outcome.withheld_version = p.withdrawn_match;
                    }});
  ReportOptions report;
  report.store = o.store;
  report.out_dir = in_folder(o, "report");
  report.lightcurves = lc_opt ? lc_opt->output_path : "";
  report.grid = grid ? grid_result_path(*grid) : "";
  report.figure_width = o.report_figure_width;
  report.table_errors = o.report_table_errors;
  // Keyed by the choices only when they are not the defaults, so that run folders made
  // before these keys existed do not redo their report.
  std::string report_settings;
  if (o.report_figure_width != FigureWidth::kScreen)
    report_settings +=
        fmt::format("figure_width={} ", kFigureWidthNames.name(o.report_figure_width));
  if (o.report_table_errors != TableErrors::kCovariance)
    report_settings +=
        fmt::format("table_errors={}", kTableErrorsNames.name(o.report_table_errors));
  if (o.report)
    stages.push_back({"report", "", report_settings, [&] { return declared_files(report); },
                      [&] { write_report(report); }, true});
  ApplyOptions apply;
  if (t_ingest) {
    stages.push_back({"targets_ingest", o.targets_ingest_config, "",
                      [&] { return declared_files(*t_ingest); },
                      [&] { ingest_catalog_file(*t_ingest); }});
    stages.push_back({"targets_deredden", o.targets_deredden_config, "",
                      [&] { return declared_files(*t_deredden); },
                      [&] { deredden_catalog_file(*t_deredden); }});
    apply.store = o.store;
    apply.relation = o.apply_relation;
    apply.targets_path = t_deredden->output_path;
    apply.output_path = in_folder(o, "distances.fits");
    apply.csv_path = in_folder(o, "distances.csv");
    if (grid) {  // the budget's systematics join the distances
      apply.grid_path = grid_result_path(*grid);
      apply.grid_skip_categories = o.apply_grid_skip_categories;
    }
    std::string apply_settings = "relation=" + o.apply_relation;
    for (const auto& c : o.apply_grid_skip_categories) apply_settings += " grid_skip=" + c;
    stages.push_back({"apply", "", apply_settings, [&] { return declared_files(apply); },
                      [&] { apply_calibration_files(apply); }, true});
  }

  // Dry run: the files and shared folders the stages that would run rewrite.
  std::set<std::string> will_change;
  const std::string calibration_place = calibration_folder(o.store, o.calibration);
  for (std::size_t i = 0; i < stages.size(); ++i) {
    Stage& s = stages[i];
    if (s.uses_calibration) {
      std::vector<std::string> refs = latest_versions(o);
      if (refs.empty()) {
        if (!o.dry_run) throw std::logic_error("no calibration in the store after publish");
      } else {
        report.calibrations = refs;
        apply.calibration = refs.back();
      }
    }
    s.files = s.declare();
    const std::string key = stage_key(s);
    std::string why = o.force ? "forced" : state.why_run(s, key);
    if (why.empty() && o.dry_run) {
      // A dry run cannot see the new products: a stage reruns when an input of it would change.
      for (const auto& in : s.files.inputs)
        if (will_change.count(in)) why = fs::path(in).filename().string() + " would change";
      if (s.uses_calibration && will_change.count(calibration_place))
        why = "a new version may be published";
    }
    StageReport rep{s.name, !why.empty(), why.empty() ? "up to date" : why};
    if (o.dry_run) {
      spdlog::debug("{}: {}", s.name, rep.ran ? "would run (" + why + ")" : "up to date");
      if (rep.ran) {
        will_change.insert(s.files.outputs.begin(), s.files.outputs.end());
        if (!s.files.adds_to.empty()) will_change.insert(s.files.adds_to);
      }
      outcome.stages.push_back(rep);
      continue;
    }
    if (!rep.ran) {
      spdlog::info("{}: up to date, skipped", s.name);
      outcome.stages.push_back(rep);
      continue;
    }
    spdlog::info("{}: running ({})", s.name, why);
    s.run();
    fault_point(("run_after_" + s.name).c_str());
    state.record(s, key);  // a stage never writes its own inputs: the key still holds
    outcome.stages.push_back(rep);
  }

  // The outcome and its exit code.
  std::vector<std::string> ran, skipped;
  for (const auto& r : outcome.stages) (r.ran ? ran : skipped).push_back(r.name);
  std::vector<int> versions = calibration_versions(o.store, o.calibration);
  outcome.version = latest_version(o.store, o.calibration).value_or(0);
  std::string latest_sha;
  if (outcome.version > 0 && !o.dry_run)
    latest_sha = note_if_new(o, versions, state.announced(o.calibration), outcome);
  outcome.code = outcome_code(o, ran, outcome);
  outcome.summary = summary_line(o, ran, skipped, outcome);
  if (!o.dry_run) {
    record_run(o, static_cast<int>(outcome.code), outcome.summary);
    refresh_site(o, outcome, !ran.empty());
  }
  // Recorded last: a run killed before this point leaves its news to the next run.
  fault_point("run_before_summary");
  if (!latest_sha.empty()) state.record_announced(o.calibration, outcome.version, latest_sha);
  return outcome;
}

}  // namespace

}  // namespace rungcal
