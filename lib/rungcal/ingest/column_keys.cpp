// SPDX-License-Identifier: MIT
#include "rungcal/ingest/column_keys.hpp"

#include <vector>

#include <fmt/format.h>

#include "rungcal/core/suggest.hpp"
#include "rungcal/table/catalog_schema.hpp"

namespace rungcal {

std::string unknown_column_key_message(const std::string& key) {
  constexpr const char* kWhere = "the keys are listed in docs/file-formats.md, \"Column map\"";
  std::vector<std::string> keys;
  for (const auto& q : catalog_quantities()) {
    keys.emplace_back(q.key);
    if (q.column == key)
      return fmt::format("not a [columns] key: {} is the catalog column, its key is '{}' ({})", key,
                         q.key, kWhere);
  }
  if (key.rfind("mag_", 0) == 0 || key == "mag" || key == "magnitude")
    return fmt::format(
        "not a [columns] key: magnitudes are mapped per band, in [bands.NAME] with mag and err "
        "({})",
        kWhere);
  if (auto near = closest_match(key, keys))
    return fmt::format("not a catalog quantity; did you mean '{}'? ({})", *near, kWhere);
  std::string list;
  for (const auto& k : keys) list += (list.empty() ? "" : ", ") + k;
  return fmt::format("not a catalog quantity (known: {}; {})", list, kWhere);
}

}  // namespace rungcal
