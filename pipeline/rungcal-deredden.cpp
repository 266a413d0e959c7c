// SPDX-License-Identifier: MIT
// rungcal-deredden: dereddened and Wesenheit magnitudes for a catalog; or, in query mode,
// A_lambda / A_V of a law at given wavelengths.
#include <cstdio>

#include <spdlog/spdlog.h>

#include "rungcal/core/stage_main.hpp"
#include "rungcal/deredden/deredden.hpp"

int main(int argc, char** argv) {
  CLI::App app{
      "Corrects a catalog's magnitudes for extinction and forms Wesenheit magnitudes. "
      "With --law, --rv and --wavelength it instead prints A_lambda/A_V, one line per wavelength."};
  rungcal::CommonOptions common;
  std::string config_path, out_path, in_path, law_name;
  double r_v = 3.1;
  std::vector<double> wavelengths;
  app.add_option("--config", config_path, "Deredden config (TOML)");
  app.add_option("--out", out_path, "Catalog to write (overrides [deredden] output)");
  app.add_option("--law", law_name,
                 "Query mode: extinction law (ccm89, odonnell94, fitzpatrick99)");
  app.add_option("--rv", r_v, "Query mode: R_V");
  app.add_option("--wavelength", wavelengths, "Query mode: wavelengths in Angstrom")
      ->expected(1, -1);
  app.add_option("--input", in_path, "Input catalog (overrides [deredden] input)");
  common.add_to(app);
  if (int rc = rungcal::parse_command_line(app, argc, argv); rc >= 0) return rc;
  rungcal::setup_logging("deredden", common.verbosity(), common.log_file);

  return rungcal::run_stage("deredden", [&] {
    if (!law_name.empty() || !wavelengths.empty()) {
      auto law = rungcal::kExtinctionLawNames.parse(law_name);
      if (!law)
        throw rungcal::InputError({"", {}, "--law"}, "config_value",
                                  fmt::format("'{}' is not one of: {}", law_name,
                                              rungcal::kExtinctionLawNames.choices()));
      if (wavelengths.empty())
        throw rungcal::InputError({"", {}, "--wavelength"}, "config_value",
                                  "give at least one wavelength");
      for (double w : wavelengths)
        std::printf("%.6g %.10f\n", w, rungcal::extinction_ratio(*law, w, r_v));
      return rungcal::ExitCode::kSuccess;
    }
    if (config_path.empty())
      throw rungcal::InputError({"", {}, "--config"}, "config_value",
                                "give --config, or --law/--rv/--wavelength for a query");
    rungcal::DereddenOptions options = rungcal::deredden_options_from_file(config_path);
    if (!in_path.empty()) options.input_path = in_path;
    if (!out_path.empty()) options.output_path = out_path;
    rungcal::DereddenResult result = rungcal::deredden_catalog_file(options);
    for (const auto& c : result.coefficients) {
      if (c.wesenheit)
        spdlog::info("{} = {} - {:.4f} ({} - {})", c.name, c.x, c.r, c.y, c.z);
      else
        spdlog::info("A_{} / E(B-V) = {:.4f}", c.name, c.a_over_ebv);
    }
    if (result.stars_without_ebv)
      spdlog::warn("{} stars have no E(B-V): their dereddened magnitudes are empty",
                   result.stars_without_ebv);
    spdlog::info("catalog: {}", options.output_path);
    return rungcal::ExitCode::kSuccess;
  });
}
