// SPDX-License-Identifier: MIT
// rungcal-diff: two versions of a calibration side by side.
#include <cstdio>
#include <optional>

#include "rungcal/calibration/diff.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/core/stage_main.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Shows two versions of a calibration side by side: parameter shifts in units of the "
      "combined sigma, inputs that changed, and stars that entered or left the fit."};
  rungcal::CommonOptions common;
  std::string store, from, to;
  app.add_option("--store", store, "Calibration store folder")->required();
  app.add_option("--to", to, "Newer version: name@N or name@latest")->required();
  app.add_option("--from", from, "Older version: name@N (default: the version before --to)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("diff", common.verbosity(), common.log_file);

  return rungcal::run_stage("diff", [&] {
    rungcal::Calibration b = rungcal::load_calibration(store, to);
    std::string older = from;
    if (older.empty()) {
      const std::optional<int> previous = rungcal::previous_version(b.document);
      if (!previous)
        throw rungcal::InputError({to, {}, {}}, "no_previous_version",
                                  "this is the first version: give --from");
      older = b.name() + "@" + std::to_string(*previous);
    }
    rungcal::Calibration a = rungcal::load_calibration(store, older);
    std::fputs(rungcal::format_diff(rungcal::diff_calibrations(a, b)).c_str(), stdout);
    return rungcal::ExitCode::kSuccess;
  });
}
