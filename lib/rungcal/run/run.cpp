// SPDX-License-Identifier: MIT
#include "rungcal/run/run.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <functional>
#include <set>
#include <sstream>

#include <fmt/format.h>
#include <spdlog/spdlog.h>
#include <nlohmann/json.hpp>

#include "rungcal/calibration/apply_products.hpp"
#include "rungcal/calibration/diff.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/fault.hpp"
#include "rungcal/core/file_lock.hpp"
#include "rungcal/core/json_io.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/version.hpp"
#include "rungcal/deredden/deredden.hpp"
#include "rungcal/grid/grid.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/report/report.hpp"
#include "rungcal/report/site.hpp"
#include "rungcal/run/run_history.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

constexpr int kStateSchemaVersion = 1;

// One stage of the chain: what keys it, what it writes, how it runs.
struct Stage {
  std::string name;
  std::string config;                // stage config file ("" = none)
  std::vector<std::string> inputs;   // files whose bytes key the stage
  std::string settings;              // overrides and choices that key it too
  std::vector<std::string> outputs;  // files it writes (a missing one reruns it)
  std::string output_folder;         // a folder whose every file is its product (report)
  std::function<void()> run;
  bool uses_calibration = false;  // keyed by the store's latest version too
};

std::string in_folder(const RunOptions& o, const std::string& name) {
  return (fs::path(o.folder) / name).string();
}

// SHA-256 of everything that decides a stage's products.
// A path as the key sees it: absolute and normalised, so that a config named relatively,
// absolutely or from another working directory keys its stages the same.
std::string key_path(const std::string& path) {
  std::error_code ec;
  fs::path p = fs::weakly_canonical(fs::absolute(path, ec), ec);
  return ec ? path : p.string();
}

// A stage config by its parsed content: a comment or layout edit reruns nothing (issue 15).
std::string config_sha(const std::string& path) { return Config::from_file(path).sha256(); }

// An input's hash: a TOML file (a band table, another stage's config) by its parsed content
// like a stage config, any other file by its bytes; "missing" when absent.
std::string input_sha(const std::string& path) {
  if (!fs::exists(path)) return "missing";
  if (fs::path(path).extension() == ".toml") return config_sha(path);
  return sha256_file(path);
}

std::string stage_key(const Stage& s) {
  std::string text = fmt::format("stage={}\nsoftware={} {}\nsettings={}\n", s.name,
                                 software_version(), software_commit(), s.settings);
  if (!s.config.empty()) text += fmt::format("config={} {}\n", key_path(s.config), config_sha(s.config));
  for (const auto& in : s.inputs)
    text += fmt::format("input={} {}\n", key_path(in), input_sha(in));
  return sha256_hex(text);
}

std::vector<std::string> products_of(const Stage& s) {
  std::vector<std::string> out = s.outputs;
  if (!s.output_folder.empty() && fs::exists(s.output_folder))
    for (const auto& e : fs::directory_iterator(s.output_folder))
      if (e.is_regular_file() && e.path().filename().string().rfind('.', 0) != 0)
        out.push_back(e.path().string());
  std::sort(out.begin(), out.end());
  return out;
}

class RunState {
 public:
  explicit RunState(std::string path) : path_(std::move(path)) {
    if (!fs::exists(path_)) return;
    try {
      state_ = read_json_file(path_);  // depth-capped; a folder or FIFO here is refused
      if (!state_.is_object())
        throw InputError({path_, {}, {}}, "json_syntax", "not a JSON object");
    } catch (const InputError& e) {
      if (e.rule() == "input_not_regular_file" || e.rule() == "unreadable_file") throw;
      // Written atomically, so only a hand edit breaks it: start over rather than guess.
      spdlog::warn("{}: unreadable run state ({}): every stage reruns", path_, e.what());
      state_ = nlohmann::json::object();
    }
  }

  // "" when the stage's record matches key and its products are all there unchanged, else
  // the reason it must run.
  std::string why_run(const Stage& s, const std::string& key) const {
    if (!state_.contains("stages") || !state_["stages"].contains(s.name)) return "never ran here";
    const auto& rec = state_["stages"][s.name];
    if (rec.value("key", "") != key) return changed_part(s, rec);
    for (const auto& [path, sha] : rec["outputs"].items()) {
      if (!fs::exists(path)) return "product " + fs::path(path).filename().string() + " is missing";
      if (sha256_file(path) != sha.get<std::string>())
        return "product " + fs::path(path).filename().string() + " was changed";
    }
    return "";
  }

  // The version of a calibration the last finished run reported, and its content hash:
  // {0, ""} when none (a state from before rungcal recorded it, too).
  std::pair<int, std::string> announced(const std::string& calibration) const {
    if (!state_.contains("announced") || !state_["announced"].contains(calibration)) return {0, ""};
    const auto& a = state_["announced"][calibration];
    return {a.value("version", 0), a.value("content_sha256", "")};
  }
  // Written only when it changes: a run with nothing new leaves the state as it was.
  void record_announced(const std::string& calibration, int version, const std::string& sha) {
    if (announced(calibration) == std::make_pair(version, sha)) return;
    state_["schema"] = "rungcal-run-state";
    state_["schema_version"] = kStateSchemaVersion;
    state_["announced"][calibration] = {{"version", version}, {"content_sha256", sha}};
    write_file_atomically(path_, state_.dump(2) + "\n");
  }

  void record(const Stage& s, const std::string& key) {
    nlohmann::json rec;
    rec["key"] = key;
    rec["config_sha256"] = s.config.empty() ? "" : config_sha(s.config);
    rec["inputs"] = nlohmann::json::object();
    for (const auto& in : s.inputs)
      rec["inputs"][in] = input_sha(in);
    rec["outputs"] = nlohmann::json::object();
    for (const auto& out : products_of(s)) rec["outputs"][out] = sha256_file(out);
    rec["finished_utc"] = utc_now_iso8601();
    state_["schema"] = "rungcal-run-state";
    state_["schema_version"] = kStateSchemaVersion;
    state_["stages"][s.name] = rec;
    write_file_atomically(path_, state_.dump(2) + "\n");
  }

 private:
  // Names what differs from the record, for the log and --dry-run.
  static std::string changed_part(const Stage& s, const nlohmann::json& rec) {
    if (!s.config.empty() && rec.value("config_sha256", "") != config_sha(s.config))
      return "config changed";
    for (const auto& in : s.inputs) {
      const std::string now = input_sha(in);
      if (!rec.contains("inputs") || !rec["inputs"].contains(in))
        return "new input " + fs::path(in).filename().string();
      if (rec["inputs"][in].get<std::string>() != now)
        return "input " + fs::path(in).filename().string() + " changed";
    }
    return "software or settings changed";
  }

  std::string path_;
  nlohmann::json state_ = nlohmann::json::object();
};

// Whether the latest version is news: one no finished run has reported (a run killed
// between publishing and its summary leaves the report to the next run, which also catches
// a version published by hand). When it is, outcome gets the largest shift, in sigma, from
// the version last reported (else from the one the latest replaced). Returns the latest
// version's content hash.
std::string note_if_new(const RunOptions& o, const std::vector<int>& versions,
                        const std::pair<int, std::string>& announced, RunOutcome& outcome) {
  const Calibration latest =
      load_calibration(o.store, fmt::format("{}@{}", o.calibration, outcome.version));
  const std::string sha = latest.document.value("content_sha256", "");
  if (announced == std::make_pair(outcome.version, sha)) return sha;
  outcome.new_version = true;
  if (announced.first > outcome.version) outcome.rolled_back_from = announced.first;
  std::optional<Calibration> baseline;
  const bool announced_kept =
      std::find(versions.begin(), versions.end(), announced.first) != versions.end();
  if (announced.first > 0 && announced_kept) {
    Calibration before =
        load_calibration(o.store, fmt::format("{}@{}", o.calibration, announced.first));
    if (before.document.value("content_sha256", "") == announced.second)
      baseline = std::move(before);
  }
  const auto& previous = latest.document.value("previous", nlohmann::json());
  if (!baseline && previous.is_object() && previous.contains("version"))
    baseline = load_calibration(
        o.store, fmt::format("{}@{}", o.calibration, previous.at("version").get<int>()));
  if (!baseline) {
    outcome.first_version = true;  // no shift to report
    return sha;
  }
  for (const ParameterShift& sh : diff_calibrations(*baseline, latest).shifts) {
    if (!std::isfinite(sh.shift_in_sigma)) continue;
    spdlog::info("shift {} {} from v{}: {:+.5f} ({:+.2f} sigma)", sh.relation, sh.parameter,
                 baseline->version(), sh.shift, sh.shift_in_sigma);
    if (std::abs(sh.shift_in_sigma) > std::abs(outcome.max_shift_sigma)) {
      outcome.max_shift_sigma = sh.shift_in_sigma;
      outcome.max_shift_parameter = sh.relation + " " + sh.parameter;
    }
  }
  return sha;
}

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

// The first few refused rows, for the summary line and the log.
std::string first_refusals(const IngestResult& r, std::size_t how_many) {
  std::string out;
  for (std::size_t i = 0; i < r.rejected.size() && i < how_many; ++i) {
    const RejectedRow& row = r.rejected[i];
    out += fmt::format("{}row {} ({}) [{}]", out.empty() ? "" : "; ", row.source_row,
                       row.id.empty() ? "no id" : row.id, row.rule);
  }
  if (r.rejected.size() > how_many) out += "; ...";
  return out;
}

// Rows refused at ingest go into the outcome and the log (a warning, so cron mail shows it):
// a typo in a nightly catalog must not drop a star silently.
void note_refusals(const IngestResult& r, const IngestOptions& ingest, RunOutcome& outcome) {
  outcome.rows_read = r.rows_read;
  outcome.rows_refused = r.rejected.size();
  if (r.rejected.empty()) return;
  outcome.first_refusals = first_refusals(r, 3);
  spdlog::warn("ingest refused {} of {} rows of {} (every reason: {}): {}", r.rejected.size(),
               r.rows_read, ingest.input_path, ingest.rejects_csv_path, outcome.first_refusals);
  for (const RejectedRow& row : r.rejected)
    spdlog::debug("refused row {} ({}) column '{}' [{}]: {}", row.source_row, row.id, row.column,
                  row.rule, row.message);
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

std::string version_json(const RunOptions& o, const std::string& ref) {
  const int v = std::stoi(ref.substr(ref.find('@') + 1));
  return (fs::path(o.store) / o.calibration / fmt::format("v{:04d}", v) / "calibration.json")
      .string();
}

std::string joined(const std::vector<std::string>& v) {
  std::string s;
  for (const auto& x : v) s += (s.empty() ? "" : ", ") + x;
  return s.empty() ? std::string("none") : s;
}

ExitCode outcome_code(const RunOptions& o, const std::vector<std::string>& ran,
                      const RunOutcome& out) {
  if (o.dry_run) return ran.empty() ? ExitCode::kNothingToDo : ExitCode::kSuccess;
  // A rollback is a person's decision, not drift: it is news (6), never an alarm.
  if (out.new_version && out.rolled_back_from == 0 &&
      std::abs(out.max_shift_sigma) > o.drift_alarm_sigma)
    return ExitCode::kDriftAlarm;
  if (out.new_version) return ExitCode::kNewCalibration;
  return ran.empty() ? ExitCode::kNothingToDo : ExitCode::kSuccess;
}

// What moved, in the words of the summary line.
std::string shift_words(const RunOutcome& out) {
  if (out.first_version) return "the first version";
  if (out.max_shift_parameter.empty()) return "no parameter moved";
  return fmt::format("largest shift {} {:+.2f} sigma", out.max_shift_parameter,
                     out.max_shift_sigma);
}

// The one line for cron mail: what happened to the calibration, what ran, what was refused.
std::string summary_line(const RunOptions& o, const std::vector<std::string>& ran,
                         const std::vector<std::string>& skipped, const RunOutcome& out) {
  const std::string label = fmt::format("{}@{}", o.calibration, out.version);
  std::string line;
  if (o.dry_run)
    line = fmt::format("rungcal-run (dry run): would run {}; up to date: {}", joined(ran),
                       joined(skipped));
  else if (out.new_version && out.rolled_back_from > 0)
    line = fmt::format("rungcal-run: latest is {}, rolled back from version {} ({}); ran {}",
                       label, out.rolled_back_from, shift_words(out), joined(ran));
  else if (out.new_version && outcome_code(o, ran, out) == ExitCode::kDriftAlarm)
    line = fmt::format(
        "rungcal-run: DRIFT ALARM: new {} moves {} by {:+.2f} sigma (threshold {}); ran {}", label,
        out.max_shift_parameter, out.max_shift_sigma, o.drift_alarm_sigma, joined(ran));
  else if (out.new_version)
    line = fmt::format("rungcal-run: new calibration {} ({}); ran {}", label, shift_words(out),
                       joined(ran));
  else if (ran.empty())
    line = fmt::format("rungcal-run: nothing changed; {} stands",
                       out.version ? label : "no calibration");
  else
    line = fmt::format("rungcal-run: ran {}; the calibration is unchanged ({})", joined(ran), label);
  if (out.withheld_version > 0)
    line += fmt::format("; the fit gave withdrawn version {}'s content again, not republished",
                        out.withheld_version);
  if (out.rows_refused > 0)
    line += fmt::format("; ingest refused {} of {} rows: {}", out.rows_refused, out.rows_read,
                        out.first_refusals);
  return line;
}

}  // namespace

std::string RunOptions::check() const {
  if (folder.empty()) return "run.folder: required";
  if (store.empty()) return "run.store: required";
  if (calibration.empty())
    return "run.calibration: required (the name versions are published under)";
  if (auto why = check_calibration_name(calibration); !why.empty()) return "run.calibration: " + why.substr(6);
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
      if (!width) s->fail("figure_width", "must be one of: " + std::string(kFigureWidthNames.choices()));
      o.report_figure_width = *width;
    }
    if (auto e = s->get_string("table_errors")) {
      const auto errors = kTableErrorsNames.parse(*e);
      if (!errors) s->fail("table_errors", "must be one of: " + std::string(kTableErrorsNames.choices()));
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
    if (o.fit_bootstrap >= 0) fit.bootstrap = o.fit_bootstrap;
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

void record_run(const RunOptions& o, int code, const std::string& summary) {
  append_run_record(in_folder(o, "run_history.json"), {utc_now_iso8601(), code, summary});
}

// The status page, after a run that changed anything (and when it is missing).
void refresh_site(const RunOptions& o, const RunOutcome& outcome, bool ran_any) {
  if (!o.site || outcome.version == 0) return;
  const std::string site = in_folder(o, "site");
  if (!ran_any && !outcome.new_version && fs::exists(site + "/index.html")) return;
  SiteOptions s;
  s.store = o.store;
  s.calibration = o.calibration;
  s.out_dir = site;
  s.run_folder = o.folder;
  s.drift_alarm_sigma = o.drift_alarm_sigma;
  write_site(s);
}

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
    const int code = dynamic_cast<const WriteError*>(&e)   ? static_cast<int>(ExitCode::kCannotWrite)
                     : dynamic_cast<const InputError*>(&e) ? static_cast<int>(ExitCode::kBadInput)
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

  std::vector<Stage> stages;
  if (lc_opt)
    stages.push_back({"lightcurve",
                      o.lightcurve_config,
                      [&] {  // every per-star file keys the stage, not the glob
                        std::vector<std::string> in = lightcurve_input_files(*lc_opt);
                        in.push_back(lc_opt->bands_file);
                        return in;
                      }(),
                      "",
                      {lc_opt->output_path, lc_opt->summary_csv_path},
                      "",
                      [&] { write_lightcurve_products(run_lightcurves(*lc_opt), *lc_opt); }});
  {
    std::vector<std::string> in = {ingest.input_path};
    if (lc_opt) in.push_back(lc_opt->output_path);
    stages.push_back({"ingest",
                      o.ingest_config,
                      in,
                      "",
                      {ingest.catalog_path, ingest.rejects_csv_path},
                      "",
                      [&] { note_refusals(ingest_catalog_file(ingest), ingest, outcome); }});
  }
  stages.push_back({"deredden",
                    o.deredden_config,
                    {deredden.input_path, deredden.bands_file},
                    "",
                    {deredden.output_path},
                    "",
                    [&] { deredden_catalog_file(deredden); }});
  // Every file a stage reads keys it: the fit's zero-point tables, the grid's band table.
  std::vector<std::string> fit_inputs = {fit.input_path};
  for (const auto& table : {fit.zero_point_table_5p, fit.zero_point_table_6p})
    if (!table.empty()) fit_inputs.push_back(table);
  stages.push_back({"fit",
                    o.fit_config,
                    fit_inputs,
                    fmt::format("bootstrap={}", fit.bootstrap),
                    {fit.output_path, fit.residuals_path},
                    "",
                    [&] { spdlog::info("fit:\n{}", fit_summary(fit_catalog_file(fit))); }});
  if (grid)
    stages.push_back({"grid",
                      o.grid_config,
                      [&] {
                        std::vector<std::string> in = fit_inputs;
                        in.front() = grid->catalog_path;
                        in.push_back(o.deredden_config);
                        in.push_back(o.fit_config);
                        in.push_back(deredden.bands_file);
                        return in;
                      }(),
                      "",
                      {in_folder(o, "grid/grid.json"), in_folder(o, "grid/error_budget.csv")},
                      "",
                      [&] { run_grid_files(*grid); }});
  PublishOptions publish;
  publish.store = o.store;
  publish.name = o.calibration;
  publish.fit_path = fit.output_path;
  publish.residuals_path = fit.residuals_path;
  publish.config_path = o.fit_config;
  publish.lock_wait_seconds = o.lock_wait_seconds;
  publish.republish_withdrawn = o.republish_withdrawn;
  stages.push_back({"publish",
                    o.fit_config,
                    {fit.output_path, fit.residuals_path},
                    fmt::format("store={} name={} republish_withdrawn={}", o.store, o.calibration,
                                o.republish_withdrawn),
                    {},
                    "",
                    [&] {
                      const PublishOutcome p = publish_calibration(publish);
                      if (!p.created) outcome.withheld_version = p.withdrawn_match;
                    }});
  ReportOptions report;
  report.store = o.store;
  report.out_dir = in_folder(o, "report");
  report.lightcurves = lc_opt ? lc_opt->output_path : "";
  report.grid = grid ? in_folder(o, "grid/grid.json") : "";
  report.figure_width = o.report_figure_width;
  report.table_errors = o.report_table_errors;
  // Keyed by the choices only when they are not the defaults, so that run folders made
  // before these keys existed do not redo their report.
  std::string report_settings;
  if (o.report_figure_width != FigureWidth::kScreen)
    report_settings += fmt::format("figure_width={} ", kFigureWidthNames.name(o.report_figure_width));
  if (o.report_table_errors != TableErrors::kCovariance)
    report_settings += fmt::format("table_errors={}", kTableErrorsNames.name(o.report_table_errors));
  if (o.report)
    stages.push_back({"report", "", {}, report_settings, {}, report.out_dir, [&] { write_report(report); }, true});
  ApplyOptions apply;
  if (t_ingest) {
    stages.push_back({"targets_ingest",
                      o.targets_ingest_config,
                      {t_ingest->input_path},
                      "",
                      {t_ingest->catalog_path, t_ingest->rejects_csv_path},
                      "",
                      [&] { ingest_catalog_file(*t_ingest); }});
    stages.push_back({"targets_deredden",
                      o.targets_deredden_config,
                      {t_deredden->input_path, t_deredden->bands_file},
                      "",
                      {t_deredden->output_path},
                      "",
                      [&] { deredden_catalog_file(*t_deredden); }});
    apply.store = o.store;
    apply.relation = o.apply_relation;
    apply.targets_path = t_deredden->output_path;
    apply.output_path = in_folder(o, "distances.fits");
    apply.csv_path = in_folder(o, "distances.csv");
    std::vector<std::string> apply_inputs = {t_deredden->output_path};
    if (grid) {  // the budget's systematics join the distances
      apply.grid_path = in_folder(o, "grid/grid.json");
      apply.grid_skip_categories = o.apply_grid_skip_categories;
      apply_inputs.push_back(apply.grid_path);
    }
    std::string apply_settings = "relation=" + o.apply_relation;
    for (const auto& c : o.apply_grid_skip_categories) apply_settings += " grid_skip=" + c;
    stages.push_back({"apply", "", apply_inputs, apply_settings, apply_product_paths(apply).all(),
                      "", [&] { apply_calibration_files(apply); }, true});
  }

  std::set<std::string> will_change;  // dry run: products the stages that would run rewrite
  for (std::size_t i = 0; i < stages.size(); ++i) {
    Stage& s = stages[i];
    if (s.uses_calibration) {
      std::vector<std::string> refs = latest_versions(o);
      if (refs.empty()) {
        if (!o.dry_run) throw std::logic_error("no calibration in the store after publish");
      } else {
        report.calibrations = refs;
        apply.calibration = refs.back();
        s.inputs.push_back(version_json(o, refs.back()));
        if (s.name == "report") {
          if (refs.size() > 1) s.inputs.push_back(version_json(o, refs.front()));
          if (lc_opt) s.inputs.push_back(lc_opt->output_path);
          if (grid) s.inputs.push_back(report.grid);
        }
      }
    }
    const std::string key = stage_key(s);
    std::string why = o.force ? "forced" : state.why_run(s, key);
    if (why.empty() && o.dry_run) {
      // A dry run cannot see the new products: a stage reruns when an input of it would change.
      for (const auto& in : s.inputs)
        if (will_change.count(in)) why = fs::path(in).filename().string() + " would change";
      if (s.uses_calibration && will_change.count(o.store)) why = "a new version may be published";
    }
    StageReport rep{s.name, !why.empty(), why.empty() ? "up to date" : why};
    if (o.dry_run) {
      spdlog::debug("{}: {}", s.name, rep.ran ? "would run (" + why + ")" : "up to date");
      if (rep.ran) {
        will_change.insert(s.outputs.begin(), s.outputs.end());
        if (s.name == "publish") will_change.insert(o.store);
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
