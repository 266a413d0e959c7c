// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

namespace rungcal {

// One finished rungcal-run, as the status page lists it.
struct RunRecord {
  std::string finished_utc;
  int exit_code = 0;
  std::string summary;  // the summary line, or the error that stopped the run
};

// run_history.json in a run folder: the newest `keep` runs, oldest first, rewritten
// atomically by each run that held the run lock.
void append_run_record(const std::string& path, const RunRecord& record, std::size_t keep = 200);

// The records (oldest first); none when the file is absent. A file that does not parse is
// an InputError (rule "run_history_schema").
std::vector<RunRecord> read_run_history(const std::string& path);

}  // namespace rungcal
