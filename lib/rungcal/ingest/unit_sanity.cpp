// SPDX-License-Identifier: MIT
#include "rungcal/ingest/unit_sanity.hpp"

#include <algorithm>
#include <cmath>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

constexpr std::size_t kMinSample = 5;

double median(std::vector<double> v) {
  const std::size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid), v.end());
  if (v.size() % 2) return v[mid];
  const double upper = v[mid];
  return 0.5 * (upper + *std::max_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid)));
}

std::string unit_said(const std::string& unit) {
  return unit.empty() ? "no unit (read as the catalog's)" : "unit '" + unit + "'";
}

}  // namespace

std::string UnitSanityOptions::check() const {
  if (!(parallax_median_min_mas > 0 && parallax_median_min_mas < parallax_median_max_mas))
    return "validate.parallax_median_range_mas: must be [min, max] mas with 0 < min < max";
  for (const auto& [cls, r] : class_period_median_d)
    if (!(r.first > 0 && r.first < r.second))
      return fmt::format(
          "validate.class_period_median_range_d.{}: must be [min, max] days with 0 < min < max",
          cls);
  for (const auto& [cls, r] : class_absolute_magnitude_median)
    if (!(r.first < r.second))
      return fmt::format(
          "validate.class_absolute_magnitude_median_range.{}: must be [min, max] mag with min < "
          "max",
          cls);
  return "";
}

std::vector<UnitFinding> find_unit_mistakes(const UnitSample& s, const UnitSanityOptions& o) {
  std::vector<UnitFinding> out;
  if (s.parallax_mas.size() >= kMinSample) {
    std::vector<double> absolute(s.parallax_mas.size());
    std::transform(s.parallax_mas.begin(), s.parallax_mas.end(), absolute.begin(),
                   [](double p) { return std::abs(p); });
    const double m = median(absolute);
    const bool high = m > o.parallax_median_max_mas;
    if (high || m < o.parallax_median_min_mas)
      out.push_back({"parallax_unit", s.parallax_column,
                     fmt::format("the median |parallax| of {} stars is {:.4g} mas, {} the "
                                 "plausible {} mas{} ([validate] parallax_median_range_mas); the "
                                 "column was read with {}: {}",
                                 absolute.size(), m, high ? "above" : "below",
                                 high ? o.parallax_median_max_mas : o.parallax_median_min_mas,
                                 high ? " for pulsating stars" : "", unit_said(s.parallax_unit),
                                 high ? "are the values mas mapped as arcsec?"
                                      : "are the values arcsec or mas mapped as uas?")});
  }
  for (const auto& [cls, periods] : s.period_d_by_class) {
    auto range = o.class_period_median_d.find(cls);
    if (range == o.class_period_median_d.end() || periods.size() < kMinSample) continue;
    const double m = median(periods);
    const auto [lo, hi] = range->second;
    if (m >= lo && m <= hi) continue;
    std::string hint = s.period_unit == "log_d" ? "are the values days mapped as log_d?"
                       : m < lo ? "are the values log10(P / d), which want unit = \"log_d\"?"
                                : "are the values in another unit than the one mapped?";
    out.push_back({"period_unit", s.period_column,
                   fmt::format("the median period of {} {} stars is {:.4g} d, outside the "
                               "class's plausible [{}, {}] d ([validate.class_period_median_"
                               "range_d]); the column was read with {}: {}",
                               periods.size(), cls, m, lo, hi, unit_said(s.period_unit), hint)});
  }
  for (const auto& [cls, by_column] : s.absolute_mag_by_class) {
    auto range = o.class_absolute_magnitude_median.find(cls);
    if (range == o.class_absolute_magnitude_median.end()) continue;
    const auto [lo, hi] = range->second;
    for (const auto& [column, mags] : by_column) {
      if (mags.size() < kMinSample) continue;
      const double m = median(mags);
      if (m >= lo && m <= hi) continue;
      out.push_back(
          {"absolute_magnitude_median", column,
           fmt::format("the median absolute magnitude of {} {} stars with parallax / error >= 5 "
                       "is {:.3g} mag (m + 5 log10(parallax / 100 mas), no extinction), outside "
                       "the class's plausible [{}, {}] mag ([validate.class_absolute_magnitude_"
                       "median_range]): is this column a magnitude, and are the parallaxes ({}) "
                       "in the unit mapped?",
                       mags.size(), cls, m, lo, hi, s.parallax_column)});
    }
  }
  return out;
}

void apply_unit_checks(const UnitSample& s, const UnitSanityOptions& o) {
  if (o.policy == UnitCheckPolicy::kOff) return;
  const std::vector<UnitFinding> found = find_unit_mistakes(s, o);
  if (found.empty()) return;
  if (o.policy == UnitCheckPolicy::kRefuse)
    throw InputError({s.file, {}, found.front().column}, found.front().rule,
                     found.front().message +
                         " (a unit mistake is refused; [validate] unit_checks = \"warn\" "
                         "lets it through)");
  for (const auto& f : found)
    spdlog::warn("{}: column '{}': [{}] {}", s.file, f.column, f.rule, f.message);
}

}  // namespace rungcal
