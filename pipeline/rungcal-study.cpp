// SPDX-License-Identifier: MIT
// rungcal-study: how the fit does on many mock catalogs with a known truth.
#include "rungcal/core/stage_main.hpp"
#include "rungcal/simulate/study_cli.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Fits many mock calibrator catalogs of one scenario, as a user would, and prints per "
      "parameter the bias in units of the reported error and the coverage of the 68% "
      "intervals."};
  rungcal::CommonOptions common;
  rungcal::StudyCommandLine line;
  rungcal::add_study_options(app, line);
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("study", common.verbosity(), common.log_file);
  return rungcal::run_stage("study", [&] { return rungcal::run_study_command(line, app); });
}
