// SPDX-License-Identifier: MIT
// The light-curve join of ingest ([lightcurves]): a rungcal-lightcurve summary's periods and
// intensity-mean magnitudes onto the catalog by star id, and the photometry rule after it.
#include "rungcal/ingest/lightcurve_join.hpp"

#include <algorithm>
#include <cmath>
#include <unordered_map>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest_parts.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/lightcurve_schema.hpp"

namespace rungcal {

void join_lightcurve_summary(StarTable& cat, const LightCurveJoin& join, IngestResult& result) {
  namespace C = lightcurve_col;
  SourceTable lc = read_lightcurve_summary(join.summary_path);
  const StarTable& s = lc.table;
  result.provenance.inputs.push_back(
      {join.summary_path, sha256_file(join.summary_path), static_cast<std::int64_t>(s.rows())});
  std::vector<std::string> bands = join.bands;
  if (bands.empty()) bands = lightcurve_summary_bands(s);
  for (const auto& b : bands)
    if (!s.has(band_column(C::kMag, b)) || !s.has(band_column(C::kMagErr, b)))
      throw InputError(
          {join.summary_path, {}, band_column(C::kMag, b)}, "missing_column",
          fmt::format("[lightcurves] bands names {}, which the summary does not have", b));

  std::unordered_map<std::string, std::size_t> lc_row;
  for (std::size_t r = 0; r < s.rows(); ++r) lc_row.emplace(s.column(C::kId).to_string(r), r);
  // Bands the catalog lacks get columns of their own, and join the catalog's band list.
  std::string band_list = std::get<std::string>(cat.keyword(key::kBands)->value);
  for (const auto& b : bands)
    if (!cat.has(magnitude_column(b))) {
      cat.add_column(magnitude_column(b), ColumnType::kReal, "mag", "mean magnitude in " + b);
      cat.add_column(magnitude_error_column(b), ColumnType::kReal, "mag", "error of mag_" + b);
      band_list += (band_list.empty() ? "" : ",") + b;
    }
  cat.set_keyword(key::kBands, band_list, "bands with mag_<band> columns");
  Column& origin =
      cat.add_column(col::kPeriodOrigin, ColumnType::kText, "", "catalog or lightcurve");
  if (join.periods && !cat.has(col::kPeriodErr))
    cat.add_column(col::kPeriodErr, ColumnType::kReal, "d", "period uncertainty");
  const bool replace = join.use == JoinUse::kReplace;
  std::size_t unmatched = 0;
  for (std::size_t r = 0; r < cat.rows(); ++r) {
    origin.text[r] = "catalog";
    origin.null[r] = 0;
    auto it = lc_row.find(cat.column(col::kId).text[r]);
    if (it == lc_row.end()) {
      ++unmatched;
      continue;
    }
    const std::size_t k = it->second;
    if (s.column(C::kUsable).is_null(k) || !s.column(C::kUsable).boolean[k]) continue;
    Column& period = cat.column(col::kPeriod);
    if (join.periods && (replace || period.is_null(r))) {
      const double p_lc = s.column(C::kPeriodD).real[k];
      const double p_cat = period.real[r];
      if (!period.is_null(r) && std::abs(p_lc / p_cat - 1) > join.warn_period_change)
        spdlog::warn(
            "{}: light-curve period {:.6f} d differs from the catalog's {:.6f} d by {:.2g}% (alias "
            "or a mode mix-up?)",
            cat.column(col::kId).text[r], p_lc, p_cat, 100 * std::abs(p_lc / p_cat - 1));
      period.real[r] = p_lc;
      period.null[r] = 0;
      cat.column(col::kLogPeriod).real[r] = std::log10(p_lc);
      cat.column(col::kLogPeriod).null[r] = 0;
      if (s.has(C::kPeriodErrD) && !s.column(C::kPeriodErrD).is_null(k)) {
        cat.column(col::kPeriodErr).real[r] = s.column(C::kPeriodErrD).real[k];
        cat.column(col::kPeriodErr).null[r] = 0;
      }
      origin.text[r] = "lightcurve";
      ++result.periods_joined;
    }
    for (const auto& b : bands) {
      const Column& m = s.column(band_column(C::kMag, b));
      const Column& e = s.column(band_column(C::kMagErr, b));
      if (m.is_null(k) || e.is_null(k)) continue;
      Column& cm = cat.column(magnitude_column(b));
      Column& ce = cat.column(magnitude_error_column(b));
      if (!replace && !cm.is_null(r)) continue;
      cm.real[r] = m.real[k];
      cm.null[r] = 0;
      ce.real[r] = e.real[k];
      ce.null[r] = 0;
      ++result.magnitudes_joined;
    }
  }
  spdlog::info(
      "light curves ({}): {} periods and {} band means joined; {} catalog stars have no light "
      "curve",
      join.summary_path, result.periods_joined, result.magnitudes_joined, unmatched);
}

namespace {

// A period the join gave against [validate]'s class ranges, named by what: the refusal, if
// any (a broken class range under class_period_check = "warn" is logged and kept).
std::optional<ingest_parts::RowReject> joined_period_refusal(
    double period_d, const std::string& pulsator_class, const IngestOptions& o,
    const std::string& what, std::int64_t row, const std::string& id) {
  if (auto reject =
          ingest_parts::implausible_period(o, period_d, pulsator_class, col::kPeriod, what))
    return reject;
  auto reject = ingest_parts::period_outside_class(o.class_limits, period_d, pulsator_class,
                                                   col::kPeriod, what);
  if (reject && o.class_limits.period_policy != UnitCheckPolicy::kRefuse) {
    spdlog::warn("{}: row {}: star '{}': [{}] {}", o.input_path, row, id, reject->rule,
                 reject->message);
    return std::nullopt;
  }
  return reject;
}

}  // namespace

std::size_t refuse_incomplete_stars_after_join(StarTable& cat, const IngestOptions& o,
                                               IngestResult& result) {
  std::vector<std::string> bands;
  for (const auto& name : cat.column_names())
    if (name.rfind("mag_err_", 0) != 0 && name.rfind("mag_", 0) == 0) bands.push_back(name);
  std::vector<std::size_t> keep;
  keep.reserve(cat.rows());
  const Column& ids = cat.column(col::kId);
  const Column& rows = cat.column(col::kSourceRow);
  const Column& period = cat.column(col::kPeriod);
  const Column* origin = cat.has(col::kPeriodOrigin) ? &cat.column(col::kPeriodOrigin) : nullptr;
  const Column& classes = cat.column(col::kClass);
  const std::string what = "light-curve period (" + o.lightcurves.summary_path + ")";
  std::vector<RejectedRow> refused;
  for (std::size_t r = 0; r < cat.rows(); ++r) {
    if (period.is_null(r)) {
      refused.push_back({rows.integer[r], ids.text[r], "no_period", "",
                         "the star has no period: the star list gives none and its light curve "
                         "gave no usable one"});
      continue;
    }
    if (origin && origin->text[r] == "lightcurve") {
      if (auto reject = joined_period_refusal(period.real[r], classes.text[r], o, what,
                                              rows.integer[r], ids.text[r])) {
        refused.push_back({rows.integer[r], ids.text[r], std::move(reject->rule),
                           std::move(reject->column), std::move(reject->message)});
        continue;
      }
    }
    const bool any = std::any_of(bands.begin(), bands.end(),
                                 [&](const std::string& b) { return !cat.column(b).is_null(r); });
    if (any) {
      keep.push_back(r);
      continue;
    }
    refused.push_back({rows.integer[r], ids.text[r], "no_photometry", "",
                       "the star has no magnitude in any configured band, nor from its light "
                       "curve"});
  }
  if (refused.empty()) return 0;
  cat = cat.select_rows(keep);
  result.stars = cat.rows();
  // The rejects stay in input order.
  result.rejected.insert(result.rejected.end(), refused.begin(), refused.end());
  std::stable_sort(
      result.rejected.begin(), result.rejected.end(),
      [](const RejectedRow& a, const RejectedRow& b) { return a.source_row < b.source_row; });
  return refused.size();
}

}  // namespace rungcal
