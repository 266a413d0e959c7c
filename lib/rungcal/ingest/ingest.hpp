// SPDX-License-Identifier: MIT
#pragma once

#include <map>
#include <optional>
#include <string>
#include <variant>
#include <vector>

#include "rungcal/core/config.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/stage_files.hpp"
#include "rungcal/ingest/unit_sanity.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/star_table.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {

// Where a canonical value comes from: an input column (with its unit), or one constant for
// every row (e.g. mode = "fundamental" for a list of fundamental-mode stars).
struct ValueSource {
  std::string column;  // input column name; empty when constant is used
  std::string unit;    // input unit; empty = the FITS TUNIT if any, else the canonical unit
  std::optional<std::variant<double, std::string>> constant;  // used when column is empty
};

enum class SelectOp { kEqual, kNotEqual, kLess, kLessEqual, kGreater, kGreaterEqual };
inline constexpr EnumTable<SelectOp, 6> kSelectOpNames{{{
    {SelectOp::kEqual, "=="},
    {SelectOp::kNotEqual, "!="},
    {SelectOp::kLess, "<"},
    {SelectOp::kLessEqual, "<="},
    {SelectOp::kGreater, ">"},
    {SelectOp::kGreaterEqual, ">="},
}}};

// Keep a row only when `column op value` holds (rows failing it are rejected with rule
// "selection"). A null value fails every selection.
struct SelectRule {
  std::string column;  // input column name
  SelectOp op = SelectOp::kEqual;
  std::variant<double, std::string> value;
  std::string describe() const;
};

// A band's magnitude and its error.
struct BandSource {
  std::string band;  // band name as in the band table (config/bands.toml)
  ValueSource mag;   // mean magnitude
  ValueSource err;   // its error (a column, or a constant for every star)
};

// An input column copied through unchanged under a new name (quality flags and the like).
struct ExtraColumn {
  std::string name;    // catalog column name
  std::string column;  // input column name
  std::string unit;    // written as TUNIT
};

// How a light-curve summary (rungcal-lightcurve, HDU SUMMARY) is joined onto the catalog
// by star id: its periods and intensity-mean magnitudes replace the catalog's, or only
// fill the catalog's empty values. Only periods without a blocking flag are joined.
enum class JoinUse { kReplace, kFill };
inline constexpr EnumTable<JoinUse, 2> kJoinUseNames{{{
    {JoinUse::kReplace, "replace"},
    {JoinUse::kFill, "fill"},
}}};

struct LightCurveJoin {
  std::string summary_path;          // "" = no join
  JoinUse use = JoinUse::kReplace;   // replace catalog values, or fill empty ones only
  std::vector<std::string> bands;    // bands whose means are joined; empty = every summary band
  bool periods = true;               // join periods too (false: magnitudes only)
  double warn_period_change = 0.01;  // relative period change that is logged per star
};

// What ingest does with an id that equals an earlier one but for letter case or spaces
// around it ("V1 Cyg" and "v1 cyg "): most likely one star written twice.
enum class IdVariantPolicy { kWarn, kRefuse };
inline constexpr EnumTable<IdVariantPolicy, 2> kIdVariantPolicyNames{{{
    {IdVariantPolicy::kWarn, "warn"},
    {IdVariantPolicy::kRefuse, "refuse"},
}}};

// Column names an archive publishes, mapped without a [columns] entry ([columns] preset):
// gaia_dr3 takes the Gaia DR3 gaia_source names (column_preset.cpp lists them).
enum class ColumnPreset { kNone, kGaiaDr3 };
inline constexpr EnumTable<ColumnPreset, 2> kColumnPresetNames{{{
    {ColumnPreset::kNone, "none"},
    {ColumnPreset::kGaiaDr3, "gaia_dr3"},
}}};

// A closed range [min, max] of plausible values.
struct PlausibleRange {
  double min = 0;
  double max = 0;
  bool contains(double v) const { return v >= min && v <= max; }
};

// Per-star limits by pulsator class ([validate]): a value that some star may have but no star
// of its class, most likely a misclassified star or a wrong value. Per quantity, a star
// beyond its class's limit is refused (rules parallax_above_class_limit and
// period_outside_class_range, in the rejects with its row), kept with a warning naming the
// file, row and rule, or not checked. Classes not listed are not checked. Defaults are
// common practice, the distances and periods recalled from memory:
// - parallax: the nearest classical Cepheid, Polaris, has about 7.5 mas, the nearest type II
//   Cepheid, kappa Pav, about 5 mas, and the nearest RR Lyrae star, RR Lyr, about 3.6 mas;
//   100 mas is a parallax of the Sun's neighbourhood within 10 pc, where none of them lies.
// - period: classical Cepheids 0.2-250 d (the shortest overtone pulsators of the Magellanic
//   Clouds to the longest fundamental-mode Cepheids known), type II Cepheids 0.8-150 d
//   (BL Her to RV Tau stars), anomalous Cepheids 0.3-3 d, RR Lyrae 0.15-1.2 d.
struct ClassLimits {
  UnitCheckPolicy parallax_policy = UnitCheckPolicy::kRefuse;  // [validate] class_parallax_check
  std::map<std::string, double> parallax_max_mas = {
      // [validate.class_parallax_max_mas]
      {"classical_cepheid", 100.0},
      {"type2_cepheid", 100.0},
      {"anomalous_cepheid", 100.0},
      {"rr_lyrae", 100.0},
  };
  UnitCheckPolicy period_policy = UnitCheckPolicy::kRefuse;  // [validate] class_period_check
  std::map<std::string, PlausibleRange> period_d = {
      // [validate.class_period_known_range_d]
      {"classical_cepheid", {0.2, 250.0}},
      {"type2_cepheid", {0.8, 150.0}},
      {"anomalous_cepheid", {0.3, 3.0}},
      {"rr_lyrae", {0.15, 1.2}},
  };
  // "" when usable, else "field: rule".
  std::string check() const;
};

struct IngestOptions {
  std::string input_path;         // catalog to read (FITS or delimited text)
  bool input_is_fits = false;     // chosen from [source] format or the file extension
  bool input_is_votable = false;  // likewise (VOTable, TABLEDATA); ECSV is known by its first line
  FitsHduChoice hdu;              // FITS: which table HDU
  TextReadOptions text;           // text: delimiter, header, missing markers
  std::map<std::string, ValueSource> quantities;     // canonical key -> source ([columns])
  ColumnPreset column_preset = ColumnPreset::kNone;  // [columns] preset: the keys not mapped
  std::vector<BandSource> bands;                     // [bands.NAME]
  std::vector<ExtraColumn> extras;                   // [extra]
  std::vector<SelectRule> selection;                 // [[select]]
  std::map<std::string, std::string> mode_aliases;   // input mode value -> canonical mode name
  std::map<std::string, std::string> class_aliases;  // input class value -> canonical class name
  double magnitude_min = -12.0;  // plausible apparent/absolute magnitude range (common practice)
  double magnitude_max = 35.0;
  double ebv_min = -0.3;  // E(B-V) below this is an error, not noise (common practice)
  double ebv_max = 10.0;
  bool require_errors = true;  // a value without its error (magnitude, parallax) rejects the row
  // Plausibility limits ([validate]): a value outside is an error in the input, not data,
  // and the row is refused with rule "<quantity>_out_of_range". Defaults are common practice,
  // wide enough for every real star: the largest stellar parallax is about 768 mas (Proxima
  // Centauri, memory); pulsation periods of the classes rungcal knows lie between about
  // 0.05 d (short RR Lyrae overtones) and a few hundred days (the longest Cepheids); stellar
  // [Fe/H] lies within +-3 dex for these populations; a magnitude error above 5 mag is no
  // measurement.
  double parallax_abs_max = 1000.0;  // mas: |parallax| at most this ([validate] parallax_max_mas)
  double parallax_err_max = 100.0;   // mas ([validate] parallax_error_max_mas)
  PlausibleRange feh_range{-3.0, 3.0};        // dex ([validate] feh_range)
  double magnitude_err_max = 5.0;             // mag ([validate] magnitude_error_max)
  PlausibleRange period_range{0.05, 1000.0};  // d, every class ([validate] period_range_d)
  std::map<std::string, PlausibleRange> class_period_range;  // d, per canonical pulsator class
                                                             // ([validate.class_period_range_d])
  IdVariantPolicy id_variants = IdVariantPolicy::kWarn;      // [validate] id_variants
  ClassLimits class_limits;                                  // [validate]: per-star limits by class
  UnitSanityOptions unit_checks;    // [validate] unit_checks and median ranges: unit mistakes
  LightCurveJoin lightcurves;       // [lightcurves]: periods and mean magnitudes from light curves
  std::int64_t chunk_rows = 20000;  // rows or text lines read at a time ([source] chunk_rows)
  std::string catalog_path = "out/catalog.fits";  // the FITS catalog product
  std::string rejects_csv_path;                   // human-readable rejects; "" = beside the catalog
  std::string config_file;                        // for messages and provenance
  std::string config_sha256;

  // "" when usable, else "field: rule" for the first broken rule.
  std::string check() const;
};

// Reads an ingest config ([source], [columns], [bands.*], [extra], [[select]], [modes],
// [classes], [validate], [output]); unknown keys stop with rule "unknown_config_key".
IngestOptions ingest_options_from_config(Config& config);
IngestOptions ingest_options_from_file(const std::string& path);

// What the stage reads: the input catalog and the light-curve summary it joins (when it
// joins one); what it writes: the catalog and the rejects CSV.
StageFiles declared_files(const IngestOptions& options);
// The rejects CSV: rejects_csv_path, or <catalog stem>_rejects.csv beside the catalog.
std::string ingest_rejects_csv_path(const IngestOptions& options);

// One rejected input row.
struct RejectedRow {
  std::int64_t source_row = 0;  // line (text) or row (FITS) in the input
  std::string id;
  std::string rule;    // short rule name, e.g. "duplicate_id"
  std::string column;  // input column involved, if any
  std::string message;
};

struct IngestResult {
  StarTable catalog;                  // canonical columns, one row per accepted star
  std::size_t stars = 0;              // accepted stars (also when streamed to the file)
  std::size_t periods_joined = 0;     // stars whose period came from the light-curve summary
  std::size_t magnitudes_joined = 0;  // band means taken from it
  std::vector<RejectedRow> rejected;  // in input order
  std::size_t rows_read = 0;
  Provenance provenance;
  StarTable rejects_table() const;
};

// Joins a light-curve summary onto an ingested catalog (adds a period_origin column).
void join_lightcurve_summary(StarTable& catalog, const LightCurveJoin& join, IngestResult& result);

// Reads, maps and validates; writes nothing. Throws InputError for whole-file problems.
IngestResult run_ingest(const IngestOptions& options);
// Runs and writes the products (catalog FITS with CATALOG and REJECTS, rejects CSV). An
// input (FITS or text) without a light-curve join streams: each group of rows goes to the file once
// checked, so the catalog is never whole in memory, and the result's catalog holds its
// columns and header only (result.stars counts the rows). Otherwise run_ingest, then
// write_ingest_products.
IngestResult ingest_catalog_file(const IngestOptions& options);
// Writes the catalog (HDUs CATALOG and REJECTS) and the rejects CSV, atomically.
void write_ingest_products(const IngestResult& result, const IngestOptions& options);

}  // namespace rungcal
