// SPDX-License-Identifier: MIT
#include "rungcal/calibration/store.hpp"

#include <fcntl.h>
#include <sys/file.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <optional>
#include <regex>
#include <sstream>
#include <thread>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/fault.hpp"
#include "rungcal/core/file_lock.hpp"
#include "rungcal/core/json_io.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

std::string read_all(const std::string& path) { return read_input_file(path); }

nlohmann::json read_json(const std::string& path) { return read_json_file(path); }

std::string version_folder(int v) { return fmt::format("v{:04d}", v); }

std::optional<int> latest_link_version(const std::string& folder) {
  std::error_code ec;
  fs::path target = fs::read_symlink(fs::path(folder) / "latest", ec);
  if (ec) return std::nullopt;
  std::smatch m;
  std::string t = target.filename().string();
  if (!std::regex_match(t, m, std::regex("v([0-9]{4,})"))) return std::nullopt;
  return std::stoi(m[1]);
}

constexpr const char* kPendingMarker = ".pending";

// Points 'latest' at a version: a new link under a temporary name renamed over the old one.
void point_latest_at(const fs::path& folder, int version) {
  fs::path link_tmp = folder / fmt::format(".latest.tmp-{}", ::getpid());
  fs::remove(link_tmp);
  fs::create_directory_symlink(version_folder(version), link_tmp);
  fault_point("publish_link_made");
  if (::rename(link_tmp.c_str(), (folder / "latest").c_str()) != 0)
    throw WriteError({(folder / "latest").string(), {}, {}}, "cannot replace the latest link");
  fsync_path(folder.string());
}

// A publisher killed after renaming its version into place but before moving 'latest'
// left the marker: the version is whole, so 'latest' is pointed at it now.
void complete_interrupted_publish(const fs::path& folder) {
  const fs::path marker = folder / kPendingMarker;
  if (!fs::exists(marker)) return;
  const std::string name = read_all(marker.string());
  std::smatch m;
  if (std::regex_match(name, m, std::regex("v([0-9]{4,})")) && fs::exists(folder / name)) {
    spdlog::warn("{}: completing an interrupted publish: 'latest' now points at {}",
                 folder.string(), name);
    point_latest_at(folder, std::stoi(m[1]));
  }
  fs::remove(marker);
  fsync_path(folder.string());
}

constexpr const char* kWithdrawnFile = "withdrawn.json";

std::vector<WithdrawnVersion> read_withdrawn(const fs::path& folder) {
  std::vector<WithdrawnVersion> out;
  const fs::path file = folder / kWithdrawnFile;
  if (!fs::exists(file)) return out;
  const nlohmann::json doc = read_json(file.string());
  auto bad = [&](const std::string& key, const std::string& why) {
    return InputError({file.string(), {}, key}, "withdrawn_schema", why);
  };
  if (!doc.is_object() || !doc.contains("withdrawn") || !doc.at("withdrawn").is_array())
    throw bad("withdrawn", "must be an object holding an array 'withdrawn'");
  for (std::size_t i = 0; i < doc.at("withdrawn").size(); ++i) {
    const nlohmann::json& e = doc.at("withdrawn")[i];
    const std::string key = fmt::format("withdrawn[{}]", i);
    if (!e.is_object() || !e.contains("version") || !e.at("version").is_number_integer())
      throw bad(key + ".version", "must be an integer version");
    out.push_back(
        {e.at("version").get<int>(), e.value("content_sha256", ""), e.value("withdrawn_utc", "")});
  }
  return out;
}

void write_withdrawn(const fs::path& folder, const std::vector<WithdrawnVersion>& list) {
  nlohmann::json doc = {{"schema", "rungcal-withdrawn"},
                        {"schema_version", 1},
                        {"withdrawn", nlohmann::json::array()}};
  for (const auto& w : list)
    doc["withdrawn"].push_back({{"version", w.version},
                                {"content_sha256", w.content_sha256},
                                {"withdrawn_utc", w.withdrawn_utc}});
  write_file_atomically((folder / kWithdrawnFile).string(), doc.dump(2) + "\n");
}

std::vector<int> versions_in(const fs::path& folder) {
  std::vector<int> out;
  std::error_code ec;
  if (!fs::is_directory(folder, ec)) return out;
  for (const auto& e : fs::directory_iterator(folder)) {
    std::smatch m;
    std::string n = e.path().filename().string();
    if (e.is_directory() && std::regex_match(n, m, std::regex("v([0-9]{4,})")))
      out.push_back(std::stoi(m[1]));
  }
  std::sort(out.begin(), out.end());
  return out;
}

std::string stored_content_sha256(const fs::path& folder, int version) {
  const fs::path file = folder / version_folder(version) / "calibration.json";
  return Calibration{read_json(file.string())}.content_sha256();
}

// Brings withdrawn.json up to date with 'latest' (call under the publishers' lock): the
// version latest names is reinstated, and every version above it is withdrawn, whether
// set_latest_version or a hand-made link moved latest down. Returns the list.
std::vector<WithdrawnVersion> record_withdrawals(const fs::path& folder, int latest) {
  std::vector<WithdrawnVersion> before = read_withdrawn(folder), list;
  for (const auto& w : before)
    if (w.version != latest) list.push_back(w);
  for (int v : versions_in(folder)) {
    if (v <= latest) continue;
    if (std::any_of(list.begin(), list.end(), [v](const auto& w) { return w.version == v; }))
      continue;
    spdlog::warn("{}: version {} is withdrawn ('latest' names version {})", folder.string(), v,
                 latest);
    list.push_back({v, stored_content_sha256(folder, v), utc_now_iso8601()});
  }
  std::sort(list.begin(), list.end(),
            [](const auto& a, const auto& b) { return a.version < b.version; });
  const bool changed =
      list.size() != before.size() ||
      !std::equal(list.begin(), list.end(), before.begin(),
                  [](const auto& a, const auto& b) { return a.version == b.version; });
  if (changed) write_withdrawn(folder, list);
  return list;
}

// The withdrawn version holding this content (0 = none). Contents are compared as computed
// now, so a version published under an older hashing rule still matches.
int withdrawn_with_content(const fs::path& folder, const std::vector<WithdrawnVersion>& list,
                           const std::string& content) {
  for (const auto& w : list)
    if (fs::exists(folder / version_folder(w.version)) &&
        stored_content_sha256(folder, w.version) == content)
      return w.version;
  return 0;
}

nlohmann::json shifts_between(const nlohmann::json& now, const nlohmann::json& before) {
  nlohmann::json out = nlohmann::json::object();
  const std::vector<FitRelationRecord> old_relations = fit_relations(before);
  for (const FitRelationRecord& r : fit_relations(now)) {
    const FitRelationRecord* old = nullptr;
    for (const FitRelationRecord& o : old_relations)
      if (o.name == r.name) old = &o;
    if (!old) continue;
    for (const FitParameterRecord& p : r.parameters) {
      for (const FitParameterRecord& q : old->parameters) {
        if (q.name != p.name) continue;
        ParameterShiftRecord s;
        s.shift = p.value - q.value;
        s.combined_sigma = std::hypot(p.error_or_nan(), q.error_or_nan());
        if (std::isfinite(s.combined_sigma) && s.combined_sigma > 0)
          s.shift_in_sigma = s.shift / s.combined_sigma;
        out[r.name][p.name] = to_json(s);
      }
    }
  }
  return out;
}

// The FITS copy: header keywords, a parameter table, and the whole JSON as one text cell
// (so the copy holds the same content, readable without a JSON parser for the numbers).
void write_calibration_fits(const Calibration& cal, const std::string& path) {
  StarTable params;
  for (const char* c :
       {calibration_fits::kRelationColumn, calibration_fits::kParameterColumn, fit_key::kMode})
    params.add_column(c, ColumnType::kText);
  for (const char* c : {fit_key::kValue, fit_key::kError, fit_key::kBootstrapError, fit_key::kP16,
                        fit_key::kP50, fit_key::kP84})
    params.add_column(c, ColumnType::kReal);
  auto push_number = [&](const char* column, const std::optional<double>& v) {
    v ? params.column(column).push_real(*v) : params.column(column).push_null();
  };
  for (const FitRelationRecord& r : fit_relations(cal.fit())) {
    for (const FitParameterRecord& p : r.parameters) {
      params.column(calibration_fits::kRelationColumn).push_text(r.name);
      params.column(calibration_fits::kParameterColumn).push_text(p.name);
      params.column(fit_key::kMode)
          .push_text(p.mode ? std::string(kParamModeNames.name(*p.mode)) : std::string());
      push_number(fit_key::kValue, p.value);
      push_number(fit_key::kError, p.error);
      push_number(fit_key::kBootstrapError, p.bootstrap_error);
      push_number(fit_key::kP16, p.p16);
      push_number(fit_key::kP50, p.p50);
      push_number(fit_key::kP84, p.p84);
    }
  }
  StarTable doc;
  doc.add_column(calibration_fits::kJsonColumn, ColumnType::kText, "",
                 "the calibration file, verbatim");
  doc.column(calibration_fits::kJsonColumn).push_text(cal.document.dump());
  for (StarTable* t : {&params, &doc}) {
    t->set_keyword(calibration_fits::kNameKeyword, cal.name(), "calibration name");
    t->set_keyword(calibration_fits::kVersionKeyword, static_cast<std::int64_t>(cal.version()),
                   "calibration version");
    t->set_keyword(calibration_fits::kContentShaKeyword,
                   cal.document.at(calibration_key::kContentSha256).get<std::string>(),
                   "content SHA-256");
    t->set_keyword(key::kSchema, static_cast<std::int64_t>(kCalibrationSchemaVersion),
                   "calibration schema version");
    t->set_keyword(key::kProduct, std::string("calibration"), "rungcal product type");
    t->set_keyword(key::kDate, cal.document.at(calibration_key::kPublishedUtc).get<std::string>(),
                   "UTC time of publishing");
  }
  write_fits_tables(
      path, {{calibration_fits::kParametersHdu, &params}, {calibration_fits::kJsonHdu, &doc}});
}

void copy_file_synced(const std::string& from, const std::string& to) {
  write_file_atomically(to, read_all(from));
}

}  // namespace

std::string check_calibration_name(const std::string& name) {
  if (!std::regex_match(name, std::regex("[A-Za-z0-9][A-Za-z0-9_.-]*")))
    return "name: letters, digits, '-', '_' and '.', starting with a letter or digit";
  return "";
}

std::string PublishOptions::check() const {
  if (store.empty()) return "store: required";
  if (auto why = check_calibration_name(name); !why.empty()) return why;
  if (fit_path.empty()) return "fit: required (a rungcal-fit result)";
  if (!(lock_wait_seconds >= 0)) return "lock_wait_seconds: must be 0 or more";
  return "";
}

std::vector<int> calibration_versions(const std::string& store, const std::string& name) {
  return versions_in(fs::path(store) / name);
}

std::optional<int> latest_version(const std::string& store, const std::string& name) {
  return latest_link_version((fs::path(store) / name).string());
}

std::vector<WithdrawnVersion> withdrawn_versions(const std::string& store,
                                                 const std::string& name) {
  const fs::path folder = fs::path(store) / name;
  const std::optional<int> latest = latest_link_version(folder.string());
  std::vector<WithdrawnVersion> out;
  for (const auto& w : read_withdrawn(folder))
    if (!latest || w.version != *latest) out.push_back(w);
  return out;
}

void set_latest_version(const std::string& store, const std::string& name, int version,
                        double lock_wait_seconds) {
  throw_if_invalid(check_calibration_name(name), "");
  const fs::path folder = fs::path(store) / name;
  if (!fs::exists(folder / version_folder(version) / "calibration.json"))
    throw InputError({folder.string(), {}, {}}, "unknown_calibration",
                     fmt::format("{} has no version {}", name, version));
  FileLock lock((folder / ".lock").string(), lock_wait_seconds, "another publisher");
  complete_interrupted_publish(folder);
  // The list first: a run killed between the two leaves a list that names a version
  // 'latest' still points at, which withdrawn_versions does not count.
  record_withdrawals(folder, version);
  point_latest_at(folder, version);
}

namespace {

// "name@which" -> {name, which}; "name" alone means name@latest.
std::pair<std::string, std::string> split_reference(const std::string& reference) {
  const auto at = reference.find('@');
  return {reference.substr(0, at), at == std::string::npos ? "latest" : reference.substr(at + 1)};
}

// The N of "name@N": digits only, at least 1 (std::stoi alone took "3abc" as 3).
std::optional<int> version_number(const std::string& which) {
  if (which.empty() || which.size() > 9 ||
      !std::all_of(which.begin(), which.end(), [](char c) { return c >= '0' && c <= '9'; }))
    return std::nullopt;
  const int n = std::stoi(which);
  return n >= 1 ? std::optional<int>(n) : std::nullopt;
}

}  // namespace

std::string calibration_folder(const std::string& store, const std::string& name) {
  return (fs::path(store) / name).string();
}

std::string calibration_file(const std::string& store, const std::string& reference) {
  const auto [name, which] = split_reference(reference);
  const std::string folder = calibration_folder(store, name);
  std::optional<int> version;
  if (which == "latest") {
    version = latest_link_version(folder);
  } else {
    version = version_number(which);  // as load_calibration reads it
  }
  if (!version) return "";
  return (fs::path(folder) / version_folder(*version) / "calibration.json").string();
}

StageFiles declared_files(const PublishOptions& o) {
  StageFiles f;
  f.add_input(o.fit_path);
  f.add_input(o.residuals_path);
  f.add_input(o.config_path);
  f.adds_to = calibration_folder(o.store, o.name);
  return f;
}

Calibration load_calibration(const std::string& store, const std::string& reference) {
  const auto [name, which] = split_reference(reference);
  fs::path folder = fs::path(store) / name;
  int version = 0;
  if (which == "latest") {
    auto v = latest_link_version(folder.string());
    if (!v)
      throw InputError({folder.string(), {}, {}}, "unknown_calibration",
                       "no published version (no 'latest' link)");
    version = *v;
  } else {
    const std::optional<int> n = version_number(which);
    if (!n)
      throw InputError({reference, {}, {}}, "unknown_calibration",
                       "give name@latest or name@N (N a version number, 1 or more)");
    version = *n;
  }
  fs::path file = folder / version_folder(version) / "calibration.json";
  if (!fs::exists(file))
    throw InputError({file.string(), {}, {}}, "unknown_calibration",
                     fmt::format("{} has no version {}", name, version));
  Calibration cal{read_json(file.string())};
  require_calibration_schema(cal.document, file.string());
  check_calibration_document(cal.document, file.string());
  return cal;
}

PublishOutcome publish_calibration(const PublishOptions& o) {
  throw_if_invalid(o.check(), "");
  nlohmann::json fit = read_json(o.fit_path);
  if (!(fit.is_object() && fit.contains(fit_key::kSchema) &&
        fit.at(fit_key::kSchema) == kFitSchemaName))
    throw InputError({o.fit_path, {}, fit_key::kSchema}, "not_a_fit_result",
                     "not a rungcal-fit result");
  check_fit_document(fit, o.fit_path);
  const std::string config_text = o.config_path.empty() ? "" : read_all(o.config_path);
  if (!o.residuals_path.empty() && !fs::exists(o.residuals_path))
    throw InputError({o.residuals_path, {}, {}}, "unreadable_file", "no such residuals file");

  fs::path folder = fs::path(o.store) / o.name;
  ensure_parent_folder((folder / ".lock").string());
  FileLock lock((folder / ".lock").string(), o.lock_wait_seconds, "another publisher");
  fault_point("publish_locked");
  complete_interrupted_publish(folder);
  // Leftovers of a publisher that died mid-way: never a version, safe to remove.
  for (const auto& e : fs::directory_iterator(folder)) {
    std::string n = e.path().filename().string();
    if (n.rfind(".v", 0) == 0 || n.rfind(".latest", 0) == 0) fs::remove_all(e.path());
  }

  PublishOutcome out;
  const std::string content = calibration_content_sha256(fit, config_text);
  std::optional<int> latest = latest_link_version(folder.string());
  std::optional<Calibration> previous;
  if (latest) {
    previous = load_calibration(o.store, fmt::format("{}@{}", o.name, *latest));
    out.version = *latest;
    out.folder = (folder / version_folder(*latest)).string();
    if (previous->content_sha256() == content) return out;
    const std::vector<WithdrawnVersion> withdrawn = record_withdrawals(folder, *latest);
    out.withdrawn_match = withdrawn_with_content(folder, withdrawn, content);
    if (out.withdrawn_match > 0 && !o.republish_withdrawn) {
      spdlog::warn(
          "{}: this content is withdrawn version {}'s; not published again, and "
          "'latest' stays at version {} (ask for it with republish_withdrawn)",
          folder.string(), out.withdrawn_match, *latest);
      return out;
    }
  }
  std::vector<int> versions = calibration_versions(o.store, o.name);
  const int version = versions.empty() ? 1 : versions.back() + 1;

  CalibrationRecord record{o.name,      version, utc_now_iso8601(), content,
                           config_text, fit,     std::nullopt};
  if (previous) {
    out.shifts = shifts_between(fit, previous->fit());
    record.previous = PreviousVersionRecord{
        previous->version(), previous->document.value(calibration_key::kContentSha256, ""),
        out.shifts};
  }
  Calibration cal{to_json(record)};

  // Build the version under a temporary name, then rename it into place: a crash leaves
  // either no new version or a whole one.
  fs::path tmp = folder / fmt::format(".{}.tmp-{}", version_folder(version), ::getpid());
  fs::create_directories(tmp);
  write_file_atomically((tmp / "calibration.json").string(), cal.document.dump(2) + "\n");
  fault_point("publish_json_written");
  write_calibration_fits(cal, (tmp / "calibration.fits").string());
  if (!o.residuals_path.empty())
    copy_file_synced(o.residuals_path, (tmp / "fit_residuals.fits").string());
  if (!o.config_path.empty()) write_file_atomically((tmp / "config.toml").string(), config_text);
  fsync_path(tmp.string());
  fault_point("publish_version_built");
  fs::path final = folder / version_folder(version);
  // Marks the window between the version's rename and the link's: a publisher killed in it
  // left a whole version that 'latest' does not name yet, which the next one completes.
  write_file_atomically((folder / kPendingMarker).string(), version_folder(version));
  if (::rename(tmp.c_str(), final.c_str()) != 0)
    throw WriteError({final.string(), {}, {}}, "cannot move the new version into place");
  fsync_path(folder.string());
  fault_point("publish_version_renamed");
  point_latest_at(folder, version);
  fs::remove(folder / kPendingMarker);
  fsync_path(folder.string());
  fault_point("publish_done");
  out.created = true;
  out.version = version;
  out.folder = final.string();
  return out;
}

}  // namespace rungcal
