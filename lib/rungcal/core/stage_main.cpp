// SPDX-License-Identifier: MIT
#include "rungcal/core/stage_main.hpp"

#include "rungcal/core/file_lock.hpp"

#include <spdlog/spdlog.h>

namespace rungcal {

void CommonOptions::add_to(CLI::App& app) {
  app.add_flag("-q,--quiet", quiet, "Print only warnings and errors");
  app.add_flag("-v,--verbose", verbose, "Print debug messages too");
  app.add_option("--log-file", log_file, "Also write every message to this file");
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
    return static_cast<int>(ExitCode::kBadInput);
  }
  return -1;
}

int run_stage(const std::string& stage, const std::function<ExitCode()>& body) {
  try {
    return static_cast<int>(body());
  } catch (const InputError& e) {
    spdlog::error("{}", e.what());
    return static_cast<int>(ExitCode::kBadInput);
  } catch (const BusyError& e) {
    spdlog::error("{}", e.what());
    return static_cast<int>(ExitCode::kBusy);
  } catch (const std::exception& e) {
    spdlog::critical("internal error in rungcal-{}: {} (please report this)", stage, e.what());
    return static_cast<int>(ExitCode::kInternalError);
  }
}

}  // namespace rungcal
