// SPDX-License-Identifier: MIT
// Fuzz target: the VOTable reader (XML through libexpat; TABLEDATA, BINARY, BINARY2). A clean
// InputError is the expected answer to any bytes; anything else is a bug.
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "rungcal/core/error.hpp"
#include "rungcal/table/votable_io.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  try {
    // Once as a catalog, then with every array column asked for (the Gaia epoch layout).
    const rungcal::SourceTable plain = rungcal::parse_votable_table(text, "fuzz.vot");
    std::vector<std::string> arrays;
    for (const auto& [name, why] : plain.unusable_columns) arrays.push_back(name);
    if (!arrays.empty()) (void)rungcal::parse_votable_table(text, "fuzz.vot", arrays);
  } catch (const rungcal::InputError&) {
  }
  return 0;
}
