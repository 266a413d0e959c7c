// SPDX-License-Identifier: MIT
#include "rungcal/deredden/deredden.hpp"

#include <cmath>
#include <sstream>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {
namespace {

std::vector<std::string> catalog_bands(const StarTable& t) {
  std::vector<std::string> out;
  const Keyword* k = t.keyword(key::kBands);
  if (!k || !std::holds_alternative<std::string>(k->value)) return out;
  std::stringstream ss(std::get<std::string>(k->value));
  std::string b;
  while (std::getline(ss, b, ','))
    if (!b.empty()) out.push_back(b);
  return out;
}

void require_column(const StarTable& t, const std::string& name, const std::string& file,
                    const std::string& why) {
  if (!t.has(name)) throw InputError({file, {}, name}, "missing_column", why);
}

}  // namespace

std::string DereddenOptions::check() const {
  if (input_path.empty()) return "input: required";
  if (output_path.empty()) return "output: required";
  if (bands_file.empty()) return "bands_file: required";
  if (!(r_v > 0) || !std::isfinite(r_v)) return "r_v: must be a positive number";
  // Measured sightlines span R_V of about 2 to 6 (common practice); far outside, the laws'
  // fits do not hold and the coefficients become meaningless.
  if (!(r_v >= 1.5 && r_v <= 8.0))
    return "r_v: must be 1.5 to 8 (measured sightlines span about 2 to 6)";
  for (const auto& [b, v] : a_over_ebv)
    if (!(v >= 0) || !std::isfinite(v))
      return fmt::format("a_over_ebv.{}: must be a non-negative number", b);
  return "";
}

DereddenOptions deredden_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  ConfigSection root = c.root();
  auto s = root.section("deredden");
  if (!s)
    throw InputError({path, {}, "deredden", "line", "key"}, "config_missing_key",
                     "a [deredden] table is required");
  DereddenOptions o;
  o.config_sha256 = c.sha256();
  o.input_path = c.resolve_path(s->require_string("input"));
  o.output_path = c.resolve_path(s->string_or("output", o.output_path));
  o.bands_file = c.resolve_path(s->string_or("bands_file", "bands.toml"));
  std::string law = s->string_or("law", std::string(kExtinctionLawNames.name(o.law)));
  auto parsed = kExtinctionLawNames.parse(law);
  if (!parsed)
    s->fail("law", fmt::format("'{}' is not one of: {}", law, kExtinctionLawNames.choices()));
  o.law = *parsed;
  o.r_v = s->number_or("r_v", o.r_v);
  if (auto b = s->get_string_list("bands")) {
    o.bands = *b;
    o.bands_given = true;
  }
  if (auto w = s->get_string_list("wesenheit")) o.wesenheit = *w;
  std::string src = s->string_or("wesenheit_r", "table");
  auto ws = kWesenheitSourceNames.parse(src);
  if (!ws)
    s->fail("wesenheit_r",
            fmt::format("'{}' is not one of: {}", src, kWesenheitSourceNames.choices()));
  o.wesenheit_source = *ws;
  if (auto a = s->section("a_over_ebv"))
    for (const auto& k : a->keys()) o.a_over_ebv[k] = *a->get_number(k);
  c.check_unknown_keys();
  throw_if_invalid(o.check(), path, "deredden.");
  return o;
}

StageFiles declared_files(const DereddenOptions& o) {
  StageFiles f;
  f.add_input(o.input_path);
  f.add_input(o.bands_file);
  f.outputs = {o.output_path};
  return f;
}

StarTable DereddenResult::coefficients_table() const {
  StarTable t;
  namespace C = coefficient_col;
  t.add_column(C::kName, ColumnType::kText);
  t.add_column(C::kKind, ColumnType::kText, "", "band or wesenheit");
  t.add_column(C::kAOverEbv, ColumnType::kReal, "",
               "A/E(B-V); for a Wesenheit its residual reddening");
  t.add_column(C::kWesenheitR, ColumnType::kReal, "", "W = m_x - R (m_y - m_z)");
  t.add_column(C::kWavelength, ColumnType::kReal, "Angstrom");
  t.add_column("x", ColumnType::kText);
  t.add_column("y", ColumnType::kText);
  t.add_column("z", ColumnType::kText);
  for (const auto& c : coefficients) {
    t.column(C::kName).push_text(c.name);
    t.column(C::kKind).push_text(c.wesenheit ? "wesenheit" : "band");
    t.column(C::kAOverEbv).push_real(c.a_over_ebv);
    t.column(C::kWesenheitR).push_real(c.r);
    c.wavelength_aa > 0 ? t.column(C::kWavelength).push_real(c.wavelength_aa)
                        : t.column(C::kWavelength).push_null();
    for (const char* k : {"x", "y", "z"}) {
      const std::string& v = k[0] == 'x' ? c.x : (k[0] == 'y' ? c.y : c.z);
      v.empty() ? t.column(k).push_null() : t.column(k).push_text(v);
    }
  }
  return t;
}

DereddenResult run_deredden(const DereddenOptions& o, const StarTable& in, const BandTable& table) {
  throw_if_invalid(o.check(), o.input_path, "deredden.");
  DereddenResult result;
  result.catalog = in;
  StarTable& cat = result.catalog;
  const std::string& file = o.input_path;
  const bool bands_listed = o.bands_given || !o.bands.empty();
  std::vector<std::string> bands = bands_listed ? o.bands : catalog_bands(in);
  if (!bands_listed && !in.has(col::kEbv) && !o.wesenheit.empty()) {
    // A Wesenheit magnitude is reddening-free by construction: it needs no E(B-V).
    spdlog::info(
        "the catalog has no E(B-V): its bands are not dereddened, only the Wesenheit "
        "magnitudes are formed");
    bands.clear();
  } else if (!bands_listed) {
    // Default: every catalog band the table knows; bands it does not know are left alone.
    std::vector<std::string> known;
    for (const auto& b : bands) {
      if (table.find(b) || o.a_over_ebv.count(b))
        known.push_back(b);
      else
        spdlog::warn("band {} is not in the band table: not dereddened", b);
    }
    bands = known;
  }
  const bool need_ebv = !bands.empty();
  if (need_ebv)
    require_column(in, col::kEbv, file,
                   "dereddening bands needs E(B-V): map an ebv column at ingest (a Wesenheit "
                   "magnitude needs none: ask for wesenheit = [...] with bands = [])");
  const std::size_t n = in.rows();
  const Column* ebv = in.has(col::kEbv) ? &in.column(col::kEbv) : nullptr;
  const Column* ebv_err = in.has(col::kEbvErr) ? &in.column(col::kEbvErr) : nullptr;
  if (ebv)
    for (std::size_t r = 0; r < n; ++r) result.stars_without_ebv += ebv->is_null(r) ? 1 : 0;

  std::map<std::string, double> coefficient_of;
  auto coefficient = [&](const std::string& band) {
    if (auto it = o.a_over_ebv.find(band); it != o.a_over_ebv.end()) return it->second;
    const Band* b = table.find(band);
    if (!b)
      throw InputError({o.bands_file, {}, band, "row", "band"}, "unknown_band",
                       "the band is not in the band table");
    return band_coefficient(*b, o.law, o.r_v);
  };

  for (const auto& band : bands) {
    require_column(in, magnitude_column(band), file, "the config asks to deredden this band");
    double rb = coefficient(band);
    coefficient_of[band] = rb;
    const Band* b = table.find(band);
    result.coefficients.push_back({band, false, rb, 0.0, b ? b->wavelength_aa : 0.0, "", "", ""});
    const Column& m = in.column(magnitude_column(band));
    const Column* e =
        in.has(magnitude_error_column(band)) ? &in.column(magnitude_error_column(band)) : nullptr;
    Column& m0 = cat.add_column(dereddened_magnitude_column(band), ColumnType::kReal, "mag",
                                "dereddened " + band);
    Column& e0 = cat.add_column(dereddened_magnitude_error_column(band), ColumnType::kReal, "mag",
                                "error of " + dereddened_magnitude_column(band) + " incl. E(B-V)");
    for (std::size_t r = 0; r < n; ++r) {
      if (m.is_null(r) || ebv->is_null(r)) continue;
      double se = ebv_err && !ebv_err->is_null(r) ? ebv_err->real[r] : 0.0;
      double sm = e && !e->is_null(r) ? e->real[r] : 0.0;
      m0.real[r] = m.real[r] - rb * ebv->real[r];
      m0.null[r] = 0;
      e0.real[r] = std::sqrt(sm * sm + rb * rb * se * se);
      e0.null[r] = 0;
    }
    Column& a =
        cat.add_column(extinction_column(band), ColumnType::kReal, "mag", "extinction in " + band);
    Column& ae = cat.add_column(extinction_error_column(band), ColumnType::kReal, "mag",
                                "error of " + extinction_column(band));
    for (std::size_t r = 0; r < n; ++r) {
      if (ebv->is_null(r)) continue;
      a.real[r] = rb * ebv->real[r];
      a.null[r] = 0;
      ae.real[r] = rb * (ebv_err && !ebv_err->is_null(r) ? ebv_err->real[r] : 0.0);
      ae.null[r] = 0;
    }
  }

  for (const auto& wname : o.wesenheit) {
    const WesenheitDef* w = table.find_wesenheit(wname);
    if (!w)
      throw InputError({o.bands_file, {}, wname, "row", "wesenheit"}, "unknown_wesenheit",
                       "the band table has no [wesenheit." + wname + "]");
    for (const auto* b : {&w->x, &w->y, &w->z})
      require_column(in, magnitude_column(*b), file,
                     fmt::format("Wesenheit {} needs band {}", wname, *b));
    double r = (o.wesenheit_source == WesenheitSource::kTable && w->r)
                   ? *w->r
                   : coefficient(w->x) / (coefficient(w->y) - coefficient(w->z));
    // What the Wesenheit leaves of the reddening under the chosen law (0 when R is the law's).
    double residual = coefficient(w->x) - r * (coefficient(w->y) - coefficient(w->z));
    result.coefficients.push_back({wname, true, residual, r, 0.0, w->x, w->y, w->z});
    if (std::abs(residual) > 0.05)
      spdlog::warn(
          "Wesenheit {} with R = {:.3f} leaves {:.3f} E(B-V) of reddening under {} (R_V = {}): "
          "its absolute magnitudes carry that much reddening bias",
          wname, r, residual, kExtinctionLawNames.name(o.law), o.r_v);
    std::map<std::string, double> weight;  // W = sum weight_b m_b
    weight[w->x] += 1.0;
    weight[w->y] -= r;
    weight[w->z] += r;
    Column& wm =
        cat.add_column(dereddened_magnitude_column(wname), ColumnType::kReal, "mag",
                       fmt::format("Wesenheit {} - {:.4f} ({} - {})", w->x, r, w->y, w->z));
    Column& we = cat.add_column(dereddened_magnitude_error_column(wname), ColumnType::kReal, "mag",
                                "error of " + dereddened_magnitude_column(wname));
    for (std::size_t row = 0; row < n; ++row) {
      double value = 0, var = 0;
      bool ok = true;
      for (const auto& [b, c] : weight) {
        const Column& m = in.column(magnitude_column(b));
        if (m.is_null(row)) {
          ok = false;
          break;
        }
        value += c * m.real[row];
        if (in.has(magnitude_error_column(b)) &&
            !in.column(magnitude_error_column(b)).is_null(row)) {
          double e = in.column(magnitude_error_column(b)).real[row];
          var += c * c * e * e;
        }
      }
      if (!ok) continue;
      wm.real[row] = value;
      wm.null[row] = 0;
      we.real[row] = std::sqrt(var);
      we.null[row] = 0;
    }
  }
  std::string names;
  for (const auto& c : result.coefficients) names += (names.empty() ? "" : ",") + c.name;
  cat.set_keyword("RGMAG0", names, "bands and Wesenheits with mag0_<name> columns");
  cat.set_keyword("RGLAW", std::string(kExtinctionLawNames.name(o.law)), "extinction law");
  cat.set_keyword("RGRV", o.r_v, "R_V = A_V / E(B-V)");
  cat.set_keyword("RGBNDSHA", table.sha256(), "SHA-256 of the band table");
  return result;
}

DereddenResult deredden_catalog_file(const DereddenOptions& o) {
  SourceTable in = read_fits_table(o.input_path, {catalog_hdu::kCatalog, 0});
  BandTable table = BandTable::from_file(o.bands_file);
  DereddenResult result = run_deredden(o, in.table, table);
  result.provenance = Provenance::for_stage("deredden");
  result.provenance.config_sha256 = o.config_sha256;
  result.provenance.inputs.push_back(
      {o.input_path, sha256_file(o.input_path), static_cast<std::int64_t>(in.table.rows())});
  result.provenance.inputs.push_back({o.bands_file, table.sha256(), -1});
  stamp_provenance(result.catalog, result.provenance, "catalog");
  StarTable coeffs = result.coefficients_table();
  stamp_provenance(coeffs, result.provenance, "coefficients");
  write_fits_tables(o.output_path, {{catalog_hdu::kCatalog, &result.catalog},
                                    {catalog_hdu::kCoefficients, &coeffs}});
  return result;
}

}  // namespace rungcal
