// SPDX-License-Identifier: MIT
#include "rungcal/run/run_parts.hpp"

#include <algorithm>
#include <filesystem>
#include <utility>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/json_io.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/version.hpp"

namespace fs = std::filesystem;

namespace rungcal::run_parts {
namespace {

constexpr int kStateSchemaVersion = 1;

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

std::vector<std::string> products_of(const Stage& s) {
  std::vector<std::string> out = s.files.outputs;
  if (!s.files.output_folder.empty() && fs::exists(s.files.output_folder))
    for (const auto& e : fs::directory_iterator(s.files.output_folder))
      if (e.is_regular_file() && e.path().filename().string().rfind('.', 0) != 0)
        out.push_back(e.path().string());
  std::sort(out.begin(), out.end());
  return out;
}

}  // namespace

std::string stage_key(const Stage& s) {
  std::string text = fmt::format("stage={}\nsoftware={} {}\nsettings={}\n", s.name,
                                 software_version(), software_commit(), s.settings);
  if (!s.config.empty())
    text += fmt::format("config={} {}\n", key_path(s.config), config_sha(s.config));
  // A glob keys the stage by its pattern and by every file it matches now: a file added,
  // removed or changed under it reruns the stage.
  for (const auto& g : s.files.input_globs) text += fmt::format("input_glob={}\n", key_path(g));
  for (const auto& in : input_files_now(s.files))
    text += fmt::format("input={} {}\n", key_path(in), input_sha(in));
  return sha256_hex(text);
}

RunState::RunState(std::string path) : path_(std::move(path)) {
  if (!fs::exists(path_)) return;
  try {
    state_ = read_json_file(path_);  // depth-capped; a folder or FIFO here is refused
    if (!state_.is_object()) throw InputError({path_, {}, {}}, "json_syntax", "not a JSON object");
  } catch (const InputError& e) {
    if (e.rule() == "input_not_regular_file" || e.rule() == "unreadable_file") throw;
    // Written atomically, so only a hand edit breaks it: start over rather than guess.
    spdlog::warn("{}: unreadable run state ({}): every stage reruns", path_, e.what());
    state_ = nlohmann::json::object();
  }
}

std::string RunState::why_run(const Stage& s, const std::string& key) const {
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

std::pair<int, std::string> RunState::announced(const std::string& calibration) const {
  if (!state_.contains("announced") || !state_["announced"].contains(calibration)) return {0, ""};
  const auto& a = state_["announced"][calibration];
  return {a.value("version", 0), a.value("content_sha256", "")};
}

void RunState::record_announced(const std::string& calibration, int version,
                                const std::string& sha) {
  if (announced(calibration) == std::make_pair(version, sha)) return;
  state_["schema"] = "rungcal-run-state";
  state_["schema_version"] = kStateSchemaVersion;
  state_["announced"][calibration] = {{"version", version}, {"content_sha256", sha}};
  write_file_atomically(path_, state_.dump(2) + "\n");
}

void RunState::record(const Stage& s, const std::string& key) {
  nlohmann::json rec;
  rec["key"] = key;
  rec["config_sha256"] = s.config.empty() ? "" : config_sha(s.config);
  rec["inputs"] = nlohmann::json::object();
  for (const auto& in : input_files_now(s.files)) rec["inputs"][in] = input_sha(in);
  rec["outputs"] = nlohmann::json::object();
  for (const auto& out : products_of(s)) rec["outputs"][out] = sha256_file(out);
  rec["finished_utc"] = utc_now_iso8601();
  state_["schema"] = "rungcal-run-state";
  state_["schema_version"] = kStateSchemaVersion;
  state_["stages"][s.name] = rec;
  write_file_atomically(path_, state_.dump(2) + "\n");
}

std::string RunState::changed_part(const Stage& s, const nlohmann::json& rec) {
  if (!s.config.empty() && rec.value("config_sha256", "") != config_sha(s.config))
    return "config changed";
  const std::vector<std::string> now = input_files_now(s.files);
  for (const auto& in : now) {
    if (!rec.contains("inputs") || !rec["inputs"].contains(in))
      return "new input " + fs::path(in).filename().string();
    if (rec["inputs"][in].get<std::string>() != input_sha(in))
      return "input " + fs::path(in).filename().string() + " changed";
  }
  if (rec.contains("inputs"))
    for (const auto& [in, sha] : rec["inputs"].items())
      if (std::find(now.begin(), now.end(), in) == now.end())
        return "input " + fs::path(in).filename().string() + " is gone";
  return "software or settings changed";
}

}  // namespace rungcal::run_parts
