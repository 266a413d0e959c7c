// SPDX-License-Identifier: MIT
#include "rungcal/run/run_parts.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <optional>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/calibration/diff.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/report/run_history.hpp"
#include "rungcal/report/site.hpp"

namespace fs = std::filesystem;

namespace rungcal::run_parts {
namespace {

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

std::string joined(const std::vector<std::string>& v) {
  std::string s;
  for (const auto& x : v) s += (s.empty() ? "" : ", ") + x;
  return s.empty() ? std::string("none") : s;
}

// What moved, in the words of the summary line.
std::string shift_words(const RunOutcome& out) {
  if (out.first_version) return "the first version";
  if (out.max_shift_parameter.empty()) return "no parameter moved";
  return fmt::format("largest shift {} {:+.2f} sigma", out.max_shift_parameter,
                     out.max_shift_sigma);
}

}  // namespace

std::string note_if_new(const RunOptions& o, const std::vector<int>& versions,
                        const std::pair<int, std::string>& announced, RunOutcome& outcome) {
  const Calibration latest =
      load_calibration(o.store, fmt::format("{}@{}", o.calibration, outcome.version));
  std::string sha = latest.document.value(calibration_key::kContentSha256, "");
  if (announced == std::make_pair(outcome.version, sha)) return sha;
  outcome.new_version = true;
  if (announced.first > outcome.version) outcome.rolled_back_from = announced.first;
  std::optional<Calibration> baseline;
  const bool announced_kept =
      std::find(versions.begin(), versions.end(), announced.first) != versions.end();
  if (announced.first > 0 && announced_kept) {
    Calibration before =
        load_calibration(o.store, fmt::format("{}@{}", o.calibration, announced.first));
    if (before.document.value(calibration_key::kContentSha256, "") == announced.second)
      baseline = std::move(before);
  }
  const std::optional<int> previous = previous_version(latest.document);
  if (!baseline && previous)
    baseline = load_calibration(o.store, fmt::format("{}@{}", o.calibration, *previous));
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

std::string summary_line(const RunOptions& o, const std::vector<std::string>& ran,
                         const std::vector<std::string>& skipped, const RunOutcome& out) {
  const std::string label = fmt::format("{}@{}", o.calibration, out.version);
  std::string line;
  if (o.dry_run)
    line = fmt::format("rungcal-run (dry run): would run {}; up to date: {}", joined(ran),
                       joined(skipped));
  else if (out.new_version && out.rolled_back_from > 0)
    line = fmt::format("rungcal-run: latest is {}, rolled back from version {} ({}); ran {}", label,
                       out.rolled_back_from, shift_words(out), joined(ran));
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
    line =
        fmt::format("rungcal-run: ran {}; the calibration is unchanged ({})", joined(ran), label);
  if (out.withheld_version > 0)
    line += fmt::format("; the fit gave withdrawn version {}'s content again, not republished",
                        out.withheld_version);
  if (out.rows_refused > 0)
    line += fmt::format("; ingest refused {} of {} rows: {}", out.rows_refused, out.rows_read,
                        out.first_refusals);
  return line;
}

void record_run(const RunOptions& o, int code, const std::string& summary) {
  append_run_record(in_folder(o, "run_history.json"), {utc_now_iso8601(), code, summary});
}

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

}  // namespace rungcal::run_parts
