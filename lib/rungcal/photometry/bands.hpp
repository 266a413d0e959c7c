// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "rungcal/core/config.hpp"
#include "rungcal/core/enum_table.hpp"
#include "rungcal/extinction/extinction.hpp"

namespace rungcal {

// Which wavelength a band table entry gives.
enum class WavelengthKind { kPivot, kEffective, kIsophotal };
inline constexpr EnumTable<WavelengthKind, 3> kWavelengthKindNames{{{
    {WavelengthKind::kPivot, "pivot"},
    {WavelengthKind::kEffective, "effective"},
    {WavelengthKind::kIsophotal, "isophotal"},
}}};

// A photometric band, from the band table (config/bands.toml).
struct Band {
  std::string name;          // as in catalogs: mag_<name>
  std::string system;        // photometric system, e.g. "Johnson-Cousins", "2MASS"
  double wavelength_aa = 0;  // the wavelength the extinction law is evaluated at
  WavelengthKind kind = WavelengthKind::kPivot;
  std::string source;  // where the wavelength comes from
  // A_band / E(B-V) given outright; overrides the law (and ignores R_V) when set.
  std::optional<double> a_over_ebv;
};

// A Wesenheit magnitude W = m_X - R (m_Y - m_Z) (Madore 1982, ApJ 253, 575), reddening-free
// by construction when R = A_X / (A_Y - A_Z) = R_X / (R_Y - R_Z).
struct WesenheitDef {
  std::string name;  // catalog band name of W (mag_<name>)
  std::string x, y, z;
  std::optional<double> r;  // given coefficient; else from the law at the bands' wavelengths
  std::string source;
};

class BandTable {
 public:
  // Reads [bands.NAME] and [wesenheit.NAME] tables (config/bands.toml); unknown keys stop.
  static BandTable from_config(Config& config);
  static BandTable from_file(const std::string& path);

  const Band* find(const std::string& name) const;
  const WesenheitDef* find_wesenheit(const std::string& name) const;
  const std::vector<Band>& bands() const { return bands_; }
  const std::vector<WesenheitDef>& wesenheits() const { return wesenheits_; }
  const std::string& sha256() const { return sha256_; }
  void add(Band b) { bands_.push_back(std::move(b)); }
  void add(WesenheitDef w) { wesenheits_.push_back(std::move(w)); }

 private:
  std::vector<Band> bands_;
  std::vector<WesenheitDef> wesenheits_;
  std::string sha256_;
};

// R_band = A_band / E(B-V) = R_V (A/A_V)(lambda_band), or the band's given value.
double band_coefficient(const Band& band, ExtinctionLaw law, double r_v);

// The Wesenheit coefficient R: given, or R_X / (R_Y - R_Z) under the law. Throws InputError
// ("unknown_band") when a band is not in the table.
double wesenheit_coefficient(const WesenheitDef& w, const BandTable& bands, ExtinctionLaw law,
                             double r_v);

}  // namespace rungcal
