// SPDX-License-Identifier: MIT
#include "rungcal/photometry/bands.hpp"

#include <cmath>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"

namespace rungcal {

BandTable BandTable::from_config(Config& config) {
  BandTable t;
  t.sha256_ = config.sha256();
  ConfigSection root = config.root();
  if (auto bands = root.section("bands")) {
    for (const auto& name : bands->keys()) {
      auto s = bands->section(name);
      if (!s) bands->fail(name, "each band is a table [bands.NAME]");
      Band b;
      b.name = name;
      b.system = s->string_or("system", "");
      b.source = s->string_or("source", "");
      auto w = s->get_number("wavelength_aa");
      b.a_over_ebv = s->get_number("a_over_ebv");
      if (!w && !b.a_over_ebv) s->fail("wavelength_aa", "required unless a_over_ebv is given");
      b.wavelength_aa = w.value_or(0.0);
      if (w && !(*w > 0)) s->fail("wavelength_aa", "must be positive (Angstrom)");
      std::string kind = s->string_or("wavelength_kind", "pivot");
      auto k = kWavelengthKindNames.parse(kind);
      if (!k)
        s->fail("wavelength_kind",
                fmt::format("'{}' is not one of: {}", kind, kWavelengthKindNames.choices()));
      b.kind = *k;
      t.bands_.push_back(std::move(b));
    }
  }
  if (auto ws = root.section("wesenheit")) {
    for (const auto& name : ws->keys()) {
      auto s = ws->section(name);
      if (!s) ws->fail(name, "each Wesenheit magnitude is a table [wesenheit.NAME]");
      WesenheitDef w;
      w.name = name;
      w.x = s->require_string("x");
      w.y = s->require_string("y");
      w.z = s->require_string("z");
      w.r = s->get_number("r");
      w.source = s->string_or("source", "");
      for (const auto* b : {&w.x, &w.y, &w.z})
        if (!t.find(*b)) s->fail("x", fmt::format("band '{}' is not in [bands]", *b));
      t.wesenheits_.push_back(std::move(w));
    }
  }
  config.check_unknown_keys();
  return t;
}

BandTable BandTable::from_file(const std::string& path) {
  Config c = Config::from_file(path);
  return from_config(c);
}

const Band* BandTable::find(const std::string& name) const {
  for (const auto& b : bands_)
    if (b.name == name) return &b;
  return nullptr;
}

const WesenheitDef* BandTable::find_wesenheit(const std::string& name) const {
  for (const auto& w : wesenheits_)
    if (w.name == name) return &w;
  return nullptr;
}

double band_coefficient(const Band& band, ExtinctionLaw law, double r_v) {
  if (band.a_over_ebv) return *band.a_over_ebv;
  try {
    return r_v * extinction_ratio(law, band.wavelength_aa, r_v);
  } catch (const InputError& e) {
    throw InputError({"", {}, band.name, "row", "band"}, e.rule(), e.detail());
  }
}

double wesenheit_coefficient(const WesenheitDef& w, const BandTable& bands, ExtinctionLaw law,
                             double r_v) {
  if (w.r) return *w.r;
  auto coefficient = [&](const std::string& name) {
    const Band* b = bands.find(name);
    if (!b)
      throw InputError({"", {}, w.name, "row", "wesenheit"}, "unknown_band",
                       fmt::format("band '{}' is not in the band table", name));
    return band_coefficient(*b, law, r_v);
  };
  double rx = coefficient(w.x), ry = coefficient(w.y), rz = coefficient(w.z);
  if (std::abs(ry - rz) < 1e-9)
    throw InputError({"", {}, w.name, "row", "wesenheit"}, "config_value",
                     "the colour's bands have equal extinction: R is undefined");
  return rx / (ry - rz);
}

}  // namespace rungcal
