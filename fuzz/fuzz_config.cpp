// SPDX-License-Identifier: MIT
// Fuzz target: the TOML config layer and two readers built on it (the ingest column map and
// the band table). A clean InputError is the expected answer to any text; anything else is
// a bug.
#include <cstddef>
#include <cstdint>
#include <string>

#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/photometry/bands.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  try {
    rungcal::Config c = rungcal::Config::from_string(text, "fuzz.toml");
    (void)rungcal::ingest_options_from_config(c);
  } catch (const rungcal::InputError&) {
  }
  try {
    rungcal::Config c = rungcal::Config::from_string(text, "fuzz.toml");
    (void)rungcal::BandTable::from_config(c);
  } catch (const rungcal::InputError&) {
  }
  return 0;
}
