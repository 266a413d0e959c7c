// SPDX-License-Identifier: MIT
#include "rungcal/lightcurve/lightcurve_stage.hpp"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <string>

#include <fmt/format.h>

#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/file_names.hpp"

namespace rungcal {

std::string LightCurveOptions::check() const {
  if (source.path.empty()) return "source.path: required";
  if (!source.is_fits)
    if (std::string t = source.text.check(); !t.empty()) return "source." + t;
  for (const auto* c : {&star_column, &time_column, &band_column, &mag_column, &err_column})
    if (c->empty()) return "columns: star, time, band, mag and mag_err must name input columns";
  if (bands_file.empty()) return "bands_file: required";
  if (!(min_period_d > 0)) return "search.min_period: must be positive";
  if (!(max_period_d > min_period_d)) return "search.max_period: must exceed min_period";
  if (!(oversampling >= 1) || !std::isfinite(oversampling))
    return "search.oversampling: must be at least 1";
  if (search_harmonics < 1 || search_harmonics > 6) return "search.harmonics: must be 1 to 6";
  if (max_order < 1 || max_order > 12) return "model.max_order: must be 1 to 12";
  if (min_dof < 1) return "model.min_dof: must be at least 1";
  if (min_points < 3 + min_dof)
    return "model.min_points: must leave min_dof degrees of freedom for a first-order model (>= 3 "
           "+ min_dof)";
  if (!(max_false_alarm > 0 && max_false_alarm <= 1))
    return "flags.max_false_alarm: must be in (0, 1]";
  if (!(max_phase_gap > 0 && max_phase_gap < 1)) return "flags.max_phase_gap: must be in (0, 1)";
  if (!(competing_peak_ratio > 0 && competing_peak_ratio <= 1))
    return "flags.competing_peak_ratio: must be in (0, 1]";
  if (threads < 0) return "threads: must be 0 (every core) or positive";
  if (std::string f = files.check(); !f.empty()) return f;
  if (layout == SourceLayout::kGaiaEpoch) {
    if (files.enabled())
      return "source.name_pattern: not with layout \"gaia_epoch\" (each row names its source)";
    if (time_scale != TimeScale::kBjdTcb)
      return "source.time_scale: Gaia epoch times are BJD in TCB: leave it out or say \"bjd_tcb\"";
    if (gaia_bands.empty()) return "source.bands: name at least one of G, BP, RP";
    for (std::size_t i = 0; i < gaia_bands.size(); ++i) {
      const std::string& b = gaia_bands[i];
      if (b != "G" && b != "BP" && b != "RP")
        return fmt::format("source.bands: '{}' is not one of G, BP, RP", b);
      if (std::find(gaia_bands.begin(), gaia_bands.begin() + static_cast<std::ptrdiff_t>(i), b) !=
          gaia_bands.begin() + static_cast<std::ptrdiff_t>(i))
        return fmt::format("source.bands: {} more than once", b);
    }
  }
  if (output_path.empty()) return "output.path: required";
  return "";
}

LightCurveOptions lightcurve_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  ConfigSection root = c.root();
  LightCurveOptions o;
  o.config_file = path;
  o.config_sha256 = c.sha256();
  auto source = root.section("source");
  if (!source)
    throw InputError({path, {}, "source", "line", "key"}, "config_missing_key",
                     "a [source] table is required");
  o.source = table_source_from_section(c, *source);
  const std::string layout =
      source->string_or("layout", std::string(kSourceLayoutNames.name(o.layout)));
  auto parsed_layout = kSourceLayoutNames.parse(layout);
  if (!parsed_layout)
    source->fail("layout",
                 fmt::format("'{}' is not one of: {}", layout, kSourceLayoutNames.choices()));
  o.layout = *parsed_layout;
  // Gaia's epochs are BJD in TCB (gaia_epoch.hpp), whatever the default of other layouts.
  if (o.layout == SourceLayout::kGaiaEpoch) o.time_scale = TimeScale::kBjdTcb;
  if (auto bands = source->get_string_list("bands")) o.gaia_bands = *bands;
  if (source->has("bands") && o.layout != SourceLayout::kGaiaEpoch)
    source->fail(
        "bands",
        "only layout \"gaia_epoch\" has bands to choose (others: a band column or source.band)");
  std::string scale =
      source->string_or("time_scale", std::string(kTimeScaleNames.name(o.time_scale)));
  auto parsed_scale = kTimeScaleNames.parse(scale);
  if (!parsed_scale)
    source->fail("time_scale",
                 fmt::format("'{}' is not one of: {}", scale, kTimeScaleNames.choices()));
  o.time_scale = *parsed_scale;
  o.files.name_pattern = source->string_or("name_pattern", "");
  o.files.band = source->string_or("band", "");
  o.files.time_offset_d = source->number_or("time_offset_d", 0.0);
  if (auto cols = root.section("columns")) {
    o.star_column = cols->string_or("star", o.star_column);
    o.time_column = cols->string_or("time", o.time_column);
    o.band_column = cols->string_or("band", o.band_column);
    o.mag_column = cols->string_or("mag", o.mag_column);
    o.err_column = cols->string_or("mag_err", o.err_column);
  }
  o.bands_file = c.resolve_path(root.string_or("bands_file", "bands.toml"));
  o.threads = static_cast<int>(root.integer_or("threads", o.threads));
  if (auto s = root.section("search")) {
    o.min_period_d = s->number_or("min_period", o.min_period_d);
    o.max_period_d = s->number_or("max_period", o.max_period_d);
    o.oversampling = s->number_or("oversampling", o.oversampling);
    o.search_harmonics = static_cast<int>(s->integer_or("harmonics", o.search_harmonics));
  }
  if (auto s = root.section("model")) {
    o.max_order = static_cast<int>(s->integer_or("max_order", o.max_order));
    o.min_points = static_cast<int>(s->integer_or("min_points", o.min_points));
    o.min_dof = static_cast<int>(s->integer_or("min_dof", o.min_dof));
  }
  if (auto s = root.section("flags")) {
    o.max_false_alarm = s->number_or("max_false_alarm", o.max_false_alarm);
    o.max_phase_gap = s->number_or("max_phase_gap", o.max_phase_gap);
    o.competing_peak_ratio = s->number_or("competing_peak_ratio", o.competing_peak_ratio);
  }
  if (auto s = root.section("output")) {
    o.output_path = c.resolve_path(s->string_or("path", o.output_path));
    if (auto csv = s->get_string("summary_csv")) o.summary_csv_path = c.resolve_path(*csv);
    if (auto p = s->get_string_list("periodograms")) o.periodogram_stars = *p;
    o.write_points = s->bool_or("points", o.write_points);
  } else {
    o.output_path = c.resolve_path(o.output_path);
  }
  c.check_unknown_keys();
  throw_if_invalid(o.check(), path);
  return o;
}

std::string lightcurve_summary_csv_path(const LightCurveOptions& o) {
  return o.summary_csv_path.empty() ? path_beside(o.output_path, ".csv") : o.summary_csv_path;
}

StageFiles declared_files(const LightCurveOptions& o) {
  StageFiles f;
  // Per-star files, and Gaia epoch photometry given as a pattern, are globs (gaia_epoch_files
  // reads a file named literally as it is).
  const bool gaia_glob =
      o.layout == SourceLayout::kGaiaEpoch && !std::filesystem::is_regular_file(o.source.path);
  if (o.files.enabled() || gaia_glob)
    f.input_globs.push_back(o.source.path);
  else
    f.add_input(o.source.path);
  f.add_input(o.bands_file);
  f.outputs = {o.output_path, lightcurve_summary_csv_path(o)};
  return f;
}

}  // namespace rungcal
