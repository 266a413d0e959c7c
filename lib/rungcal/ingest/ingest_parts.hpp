// SPDX-License-Identifier: MIT
#pragma once

// The ingest stage's parts, shared by its files (ingest.cpp runs the group pipeline;
// ingest_config.cpp reads the options and knows the aliases, column_mapping.cpp resolves
// the config's columns against the input and lays out the catalog, row_checks.cpp maps and
// checks one group of rows). Not an interface of its own: include ingest.hpp from outside
// the stage.

#include <cstddef>
#include <cstdint>
#include <map>
#include <optional>
#include <string>
#include <utility>
#include <variant>
#include <vector>

#include "rungcal/core/id_registry.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/ingest/unit_sanity.hpp"
#include "rungcal/table/source_table.hpp"
#include "rungcal/table/star_table.hpp"
#include "rungcal/table/units.hpp"

namespace rungcal::ingest_parts {

// Built-in spellings of pulsation modes and classes found in published catalogs; a
// config's [modes] / [classes] tables add to them.
const std::map<std::string, std::string>& builtin_mode_aliases();
// The built-in spellings of pulsator classes (see builtin_mode_aliases).
const std::map<std::string, std::string>& builtin_class_aliases();
// The canonical mode (is_mode) or class a value names: the config's alias wins over a
// canonical name, which wins over a built-in spelling; "" when none knows the value.
std::string canonical_choice(const std::string& value,
                             const std::map<std::string, std::string>& config_aliases,
                             const std::map<std::string, std::string>& builtin, bool is_mode);

// The options with the preset's columns added to [columns] (column_preset.cpp): each key the
// config leaves out whose archive column the input has. Keys the config maps win. Throws
// InputError (missing_column) when neither the config nor the input gives the star id.
IngestOptions with_preset_columns(const IngestOptions& o, const StarTable& input);
// True when the catalog's ecliptic latitude is computed from ra and dec: the preset is on, the
// input gives no ecl_lat and ra and dec are mapped.
bool ecl_lat_from_ra_dec(const IngestOptions& o);

// A row that breaks a rule; caught per row and turned into a RejectedRow.
struct RowReject {
  std::string rule;
  std::string column;
  std::string message;
};

// The period checks of [validate], shared by the row checks (a catalog's own periods) and the
// light-curve join (periods from light curves); what names the period in the message.
// Outside the plausible range of the star's class (period_range_d, class_period_range_d):
// rule period_out_of_range (issue 15: 1e308, 1e30 and 1e-300 d reached the fit).
std::optional<RowReject> implausible_period(const IngestOptions& o, double period_d,
                                            const std::string& pulsator_class,
                                            const std::string& column, const std::string& what);
// Outside the known range of the class (ClassLimits; unchecked classes and policy "off" pass):
// rule period_outside_class_range, a refusal or a warning by class_period_check.
std::optional<RowReject> period_outside_class(const ClassLimits& l, double period_d,
                                              const std::string& pulsator_class,
                                              const std::string& column, const std::string& what);

// Resolves a ValueSource against the input table: column pointer and unit conversion.
struct Resolved {
  std::string key;  // canonical key or band name, for messages
  const Column* column = nullptr;
  std::string column_name;
  UnitConversion conversion;
  std::optional<std::variant<double, std::string>> constant;
  bool present() const { return column || constant; }
};

// The value of a numeric quantity in a row: nullopt when missing; RowReject when unusable.
std::optional<double> number_at(const Resolved& r, std::size_t row);
// The text of a quantity in a row (a number formatted as the file or config gives it),
// without a copy where the table or the config holds it: nullptr when missing; scratch holds a
// formatted number.
const std::string* text_ref(const Resolved& r, std::size_t row, std::string& scratch);

// An input group's columns resolved against the config. Resolving comes before any row is
// read: a mapping error stops the whole file.
struct GroupMapping {
  struct Band {
    std::string band;
    Resolved mag, err;
  };
  std::map<std::string, Resolved> quantities;
  std::vector<Band> bands;
  std::vector<const Column*> select_columns, extra_columns;
  bool ecl_lat_from_ra_dec = false;  // the catalog's ecl_lat computed (ecl_lat_from_ra_dec())
  const Resolved& at(const std::string& key) const { return quantities.at(key); }
};

// Resolves every mapped quantity, band, [[select]] and [extra] column against one group;
// throws InputError naming the column when the input cannot give what the config maps.
GroupMapping resolve_group(const IngestOptions& o, const SourceTable& in);

// The mapped parallaxes and periods (by class) of one group of rows, in canonical units and
// before any row rule, for the unit checks (unit_sanity.hpp).
UnitSample unit_sample(const IngestOptions& o, const GroupMapping& m, const SourceTable& in);

// The catalog's columns (a schema without rows) and where each kind of value goes in it.
struct CatalogLayout {
  StarTable schema;
  std::size_t id = 0, source_row = 0, period = 0, log_period = 0;
  std::map<std::string, std::size_t> quantities;           // the other mapped quantities
  std::vector<std::pair<std::size_t, std::size_t>> bands;  // magnitude, error
  std::vector<std::size_t> extras;
};

// Fixed columns first, then the mapped quantities in the schema's order, bands and extras.
CatalogLayout make_catalog_layout(const IngestOptions& o, const GroupMapping& m);

// A rejected input row, kept until the duplicate-id check has run in file order.
struct RowRefusal {
  std::int64_t source_row = 0;
  std::string id;  // "" when the row has none
  RowReject reject;
};

// A group of input rows mapped and checked: the accepted rows, and for every input row its
// place in the file, its fate and its id's hash, which the workers compute so that the
// settling thread only looks ids up.
struct RowGroup {
  StarTable rows;
  std::vector<std::int64_t> source_rows;
  std::vector<std::int64_t> fate;  // the row in `rows`, or -1 - its index in `refusals`
  std::vector<IdHash> id_hash;     // meaningful where the row has an id
  std::vector<RowRefusal> refusals;
  std::vector<RowRefusal> warnings;  // accepted rows beyond a per-star limit under "warn"
  std::string row_label, id_column;
  std::size_t progress_units = 0;  // of the input taken by this group (GroupReader::next)
};

// Maps and checks one group of input rows: the accepted rows in the catalog's columns, and
// every row's fate and id hash for settling in file order.
RowGroup check_group(const IngestOptions& o, const SourceTable& in, const CatalogLayout& layout);

}  // namespace rungcal::ingest_parts
