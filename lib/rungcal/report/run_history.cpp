// SPDX-License-Identifier: MIT
#include "rungcal/report/run_history.hpp"

#include <filesystem>

#include <nlohmann/json.hpp>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/json_io.hpp"

namespace rungcal {

std::vector<RunRecord> read_run_history(const std::string& path) {
  std::vector<RunRecord> out;
  if (!std::filesystem::exists(path)) return out;
  const nlohmann::json doc = read_json_file(path);
  if (!doc.is_object() || !doc.contains("runs") || !doc.at("runs").is_array())
    throw InputError({path, {}, "runs"}, "run_history_schema",
                     "must be an object holding an array 'runs'");
  for (const auto& r : doc.at("runs")) {
    if (!r.is_object() || !r.contains("exit_code") || !r.at("exit_code").is_number_integer())
      throw InputError({path, {}, "runs"}, "run_history_schema",
                       "every run needs an integer exit_code");
    out.push_back(
        {r.value("finished_utc", ""), r.at("exit_code").get<int>(), r.value("summary", "")});
  }
  return out;
}

void append_run_record(const std::string& path, const RunRecord& record, std::size_t keep) {
  std::vector<RunRecord> runs;
  try {
    runs = read_run_history(path);
  } catch (const InputError&) {
    runs.clear();  // written atomically, so only a hand edit breaks it: start a new history
  }
  runs.push_back(record);
  if (runs.size() > keep) runs.erase(runs.begin(), runs.end() - static_cast<std::ptrdiff_t>(keep));
  nlohmann::json doc = {
      {"schema", "rungcal-run-history"}, {"schema_version", 1}, {"runs", nlohmann::json::array()}};
  for (const auto& r : runs)
    doc["runs"].push_back(
        {{"finished_utc", r.finished_utc}, {"exit_code", r.exit_code}, {"summary", r.summary}});
  write_file_atomically(path, doc.dump(2) + "\n");
}

}  // namespace rungcal
