// SPDX-License-Identifier: MIT
#include "rungcal/core/stage_main.hpp"

#include <algorithm>
#include <cstdio>

#include "rungcal/core/cluster.hpp"
#include "rungcal/core/file_lock.hpp"
#include "rungcal/core/log.hpp"
#include "rungcal/core/stage_failure.hpp"
#include "rungcal/core/version.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>
#include <spdlog/spdlog.h>

namespace rungcal {

void CommonOptions::add_to(CLI::App& app) {
  app.add_flag("-q,--quiet", quiet, "Print only warnings and errors");
  app.add_flag("-v,--verbose", verbose, "Print debug messages too");
  app.add_option("--log-file", log_file, "Also write every message to this file");
  // --help shows each option's default: the values are still the defaults here, because
  // every stage adds its own options before these. Flags (no value) show none.
  for (CLI::Option* opt : app.get_options())
    if (opt->get_items_expected_min() > 0) opt->capture_default_str();
  app.set_version_flag("--version",
                       fmt::format("{} (commit {})", software_version(), software_commit()));
  app.footer(
      "Exit codes: 0 success; 1 internal error (a bug, please report it); 2 bad input (the message "
      "names the "
      "file, row, column and rule); 3 nothing to do; 4 drift alarm; 5 busy (a lock was held); 6 "
      "new calibration; "
      "7 cannot write (disk full, permission, I/O: the errno is named) (docs/exit-codes.md).");
}

void CommonOptions::silence_stdout_if_quiet() const {
  if (quiet && !verbose && !std::freopen("/dev/null", "w", stdout))
    spdlog::warn("--quiet: could not silence stdout");
}

Verbosity CommonOptions::verbosity() const {
  if (verbose) return Verbosity::kVerbose;
  if (quiet) return Verbosity::kQuiet;
  return Verbosity::kNormal;
}

int parse_command_line(CLI::App& app, int argc, char** argv) {
  try {
    app.parse(argc, argv);
  } catch (const CLI::CallForHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForAllHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForVersion& e) {
    return app.exit(e);
  } catch (const CLI::ParseError& e) {
    app.exit(e);
    remember_stage_failure({ExitCode::kBadInput, "command_line", {}, e.what(), e.what()});
    return static_cast<int>(ExitCode::kBadInput);
  }
  return -1;
}

namespace {

// Stages that split their work across MPI ranks and write from rank 0 only. Any other
// stage launched as several ranks would write (or publish) the same products twice.
void refuse_mpi_unless_split(const std::string& stage) {
  const Cluster& cluster = Cluster::world();
  if (cluster.size() == 1) return;
  for (const char* split : {"lightcurve", "fit", "grid"})
    if (stage == split) return;
  throw InputError({}, "mpi_not_supported",
                   fmt::format("rungcal-{} runs as one process, not as {} MPI ranks; only "
                               "rungcal-lightcurve, rungcal-fit and rungcal-grid split their "
                               "work across ranks",
                               stage, cluster.size()));
}

}  // namespace

int run_stage(const std::string& stage, const std::function<ExitCode()>& body) {
  // Under MPI every rank runs the same stage; what a person reads on stdout comes from rank
  // 0 alone (errors and warnings still come from every rank, on stderr).
  if (Cluster::world().rank() > 0 && !std::freopen("/dev/null", "w", stdout))
    spdlog::warn("could not silence stdout of rank {}", Cluster::world().rank());
  try {
    throw_deferred_logging_error();
    refuse_mpi_unless_split(stage);
    return static_cast<int>(body());
  } catch (const WriteError& e) {
    spdlog::error("{}", e.what());
    remember_stage_failure({ExitCode::kCannotWrite, e.rule(), e.where(), e.detail(), e.what()});
    return static_cast<int>(ExitCode::kCannotWrite);
  } catch (const InputError& e) {
    spdlog::error("{}", e.what());
    remember_stage_failure({ExitCode::kBadInput, e.rule(), e.where(), e.detail(), e.what()});
    return static_cast<int>(ExitCode::kBadInput);
  } catch (const BusyError& e) {
    spdlog::error("{}", e.what());
    remember_stage_failure({ExitCode::kBusy, "busy", {}, e.what(), e.what()});
    return static_cast<int>(ExitCode::kBusy);
  } catch (const std::exception& e) {
    spdlog::critical("internal error in rungcal-{}: {} (please report this)", stage, e.what());
    remember_stage_failure({ExitCode::kInternalError, "internal_error", {}, e.what(), e.what()});
    return static_cast<int>(ExitCode::kInternalError);
  }
}

nlohmann::json command_line_settings(const CLI::App& app,
                                     const std::vector<std::string>& leave_out) {
  nlohmann::json settings = nlohmann::json::object();
  for (const CLI::Option* opt : app.get_options()) {
    const std::string& name = opt->get_single_name();
    if (name == "help" || name == "version" ||
        std::find(leave_out.begin(), leave_out.end(), name) != leave_out.end())
      continue;
    if (opt->get_expected_max() == 0)
      settings[name] = opt->count() > 0;
    else if (opt->count() > 0)
      settings[name] = fmt::format("{}", fmt::join(opt->results(), ","));
    else
      settings[name] = opt->get_default_str();
  }
  return settings;
}

}  // namespace rungcal
