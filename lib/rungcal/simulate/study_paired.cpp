// SPDX-License-Identifier: MIT
#include "rungcal/simulate/study_paired.hpp"

#include <cmath>
#include <map>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/json_io.hpp"
#include "rungcal/simulate/study_pool.hpp"

namespace rungcal {
namespace {

// The header keys that make one seed the same mock in both runs; the rest of the setup (the
// contaminations, the fit's options) is what the pairing compares.
constexpr const char* kSameMockKeys[] = {"stars", "truth", "parameter_names", "mock_draw_layout"};

void check_same_mocks(const StudyResult& a, const StudyResult& b, const std::string& path) {
  for (const char* key : kSameMockKeys) {
    const bool in_a = a.header.contains(key), in_b = b.header.contains(key);
    if (in_a != in_b || (in_a && a.header[key] != b.header[key]))
      throw InputError({path, std::nullopt, key, "row", "key"}, "study_pairing_differs",
                       "differs between the two runs: the same seed is not the same mock");
  }
}

PairedRow pair_parameter(const StudyResult& a, const std::map<std::uint64_t, const StudyMock*>& b,
                         std::size_t j, const std::string& name) {
  PairedRow row;
  row.parameter = name;
  double sum = 0, sum2 = 0;
  for (const StudyMock& m : a.per_mock) {
    const auto at = b.find(m.seed);
    if (!m.ok || at == b.end() || !at->second->ok) continue;
    const double d = (m.estimate[j] - at->second->estimate[j]) / at->second->error[j];
    if (!std::isfinite(d)) continue;
    ++row.pairs, sum += d, sum2 += d * d;
  }
  const double nan = std::nan("");
  if (row.pairs == 0) return {name, 0, nan, nan, nan};
  row.mean_shift = sum / row.pairs;
  row.shift_sd = row.pairs > 1
                     ? std::sqrt(std::max(0.0, (sum2 - sum * row.mean_shift) / (row.pairs - 1)))
                     : nan;
  row.shift_error = row.shift_sd / std::sqrt(static_cast<double>(row.pairs));
  return row;
}

}  // namespace

PairedStudy pair_studies(const std::string& changed, const std::string& reference) {
  const StudyResult a = read_study_run(changed), b = read_study_run(reference);
  check_same_mocks(a, b, changed);
  std::map<std::uint64_t, const StudyMock*> by_seed;
  for (const StudyMock& m : b.per_mock) by_seed[m.seed] = &m;
  PairedStudy p{changed, reference, 0, {}};
  for (const StudyMock& m : a.per_mock) p.common_seeds += by_seed.count(m.seed) > 0;
  if (p.common_seeds == 0)
    throw InputError({changed, std::nullopt, "per_mock", "row", "key"}, "study_no_common_seeds",
                     fmt::format("no seed is also in {}: nothing to pair", reference));
  const auto names = b.header.at("parameter_names").get<std::vector<std::string>>();
  for (std::size_t j = 0; j < names.size(); ++j)
    p.rows.push_back(pair_parameter(a, by_seed, j, names[j]));
  return p;
}

nlohmann::json PairedStudy::to_json() const {
  nlohmann::json j = {
      {"changed", changed}, {"reference", reference}, {"common_seeds", common_seeds}};
  j["parameters"] = nlohmann::json::array();
  for (const PairedRow& r : rows)
    j["parameters"].push_back({{"name", r.parameter},
                               {"pairs", r.pairs},
                               {"mean_shift_in_errors", json_number_or_null(r.mean_shift)},
                               {"shift_uncertainty", json_number_or_null(r.shift_error)},
                               {"shift_sd", json_number_or_null(r.shift_sd)}});
  return j;
}

std::string paired_table(const PairedStudy& p) {
  std::string s = fmt::format("{} against {}, paired by seed ({} seeds in both)\n", p.changed,
                              p.reference, p.common_seeds);
  s += fmt::format("{:<22} {:>6} {:>16} {:>9}\n", "parameter", "pairs", "shift/error", "sd");
  for (const PairedRow& r : p.rows)
    s += fmt::format("{:<22} {:>6} {:>+7.3f} +- {:<6.3f} {:>9.3f}\n", r.parameter, r.pairs,
                     r.mean_shift, r.shift_error, r.shift_sd);
  return s;
}

}  // namespace rungcal
