// SPDX-License-Identifier: MIT
#include "rungcal/grid/grid.hpp"

#include <cmath>
#include <filesystem>
#include <map>
#include <set>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/byte_buffer.hpp"
#include "rungcal/core/cluster.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/progress.hpp"
#include "rungcal/photometry/bands.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/error_budget_schema.hpp"
#include "rungcal/table/fits_io.hpp"

namespace rungcal {
namespace {

FitOptions fit_options_for(const GridOptions& g, const FitOptions& base, const GridVariant* v) {
  FitOptions o = base;
  o.bootstrap = g.bootstrap;
  o.threads = 1;  // variants run in parallel; each fit stays on one thread
  if (!v) return o;
  if (v->zero_point) o.zero_point = *v->zero_point;
  if (v->zero_point_mas) o.zero_point_mas = *v->zero_point_mas;
  if (v->max_ruwe) o.max_ruwe = *v->max_ruwe;
  if (v->loss) o.loss = *v->loss;
  if (v->loss_scale) o.loss_scale = *v->loss_scale;
  if (v->space) o.space = *v->space;
  if (v->inflation) o.inflation = *v->inflation;
  if (v->blend_min_mag) o.hierarchical.blend_min_mag = *v->blend_min_mag;
  if (v->blend_component) o.hierarchical.blends = *v->blend_component;
  for (auto& r : o.relations) {
    if (v->metallicity) r.metallicity = *v->metallicity;
    if (v->min_log_period) r.min_log_period = *v->min_log_period;
    if (v->max_log_period) r.max_log_period = *v->max_log_period;
  }
  return o;
}

// A blend-model variant changes nothing outside the hierarchical space: say so, rather than let
// its zero shift read as "the blend model does not matter".
void warn_of_blend_variants_without_blends(const GridOptions& g, const FitOptions& base) {
  for (const GridVariant& v : g.variants) {
    if (!v.blend_min_mag && !v.blend_component) continue;
    if (v.space.value_or(base.space) != FitSpace::kHierarchical)
      spdlog::warn(
          "variant '{}': blend_min_mag and blend_component shape only the hierarchical "
          "fit; in this variant's space its shift is zero by construction",
          v.name);
  }
}

DereddenOptions deredden_options_for(const DereddenOptions& base, const GridVariant& v) {
  DereddenOptions o = base;
  if (v.law) o.law = *v.law;
  if (v.r_v) o.r_v = *v.r_v;
  return o;
}

std::optional<double> number_if(const ConfigSection& s, const char* key) {
  return s.get_number(key);
}

template <typename E, std::size_t N>
std::optional<E> choice_if(const ConfigSection& s, const char* key, const EnumTable<E, N>& table) {
  if (!s.has(key)) return std::nullopt;
  return choice_or(s, key, table, table.entries[0].first);
}

// What the error budget reads of a fit, for the ranks that did not make it: per relation
// its name, parameter names and modes, values and covariance.
std::string encode_budget_fields(const FitResult& fit) {
  ByteWriter w;
  w.put<std::uint64_t>(fit.relations.size());
  for (const RelationResult& rr : fit.relations) {
    w.put_string(rr.relation.name);
    w.put_strings(rr.layout.names);
    std::vector<ParamMode> modes;
    for (const ParamSpec& p : rr.settings.params) modes.push_back(p.mode);
    w.put_vector(modes);
    w.put_vector(rr.solution.theta);
    w.put_matrix(rr.covariance);
    w.put<std::uint8_t>(rr.covariance_ok);
  }
  return w.release();
}

FitResult decode_budget_fields(const std::string& bytes) {
  ByteReader r(bytes);
  FitResult fit;
  fit.relations.resize(r.get<std::uint64_t>());
  for (RelationResult& rr : fit.relations) {
    rr.relation.name = r.get_string();
    rr.layout.names = r.get_strings();
    rr.layout.size = static_cast<int>(rr.layout.names.size());
    for (ParamMode mode : r.get_vector<ParamMode>()) rr.settings.params.push_back({mode});
    rr.solution.theta = r.get_column();
    rr.solution.usable = true;
    rr.covariance = r.get_matrix();
    rr.covariance_ok = r.get<std::uint8_t>() != 0;
  }
  return fit;
}

const RelationResult* find_relation(const FitResult& r, const std::string& name) {
  for (const auto& rel : r.relations)
    if (rel.relation.name == name) return &rel;
  return nullptr;
}

bool has_parameter(const RelationResult& r, const std::string& name) {
  for (const auto& n : r.layout.names)
    if (n == name) return true;
  return false;
}

// A number that may be null (an error the fit could not give): NaN then.
double number_or_nan(const nlohmann::json& j, const char* key) {
  return j.contains(key) && j.at(key).is_number() ? j.at(key).get<double>() : NAN;
}

std::string csv_of_budget(const nlohmann::json& budget) {
  std::string out = "relation,parameter,row,category,value_or_shift,error_or_shift_sigma\n";
  for (const auto& rel : budget.at(budget_key::kRelations)) {
    for (const auto& p : rel.at(budget_key::kParameters)) {
      const std::string prefix = fmt::format("{},{},", rel.at(budget_key::kName).get<std::string>(),
                                             p.at(budget_key::kName).get<std::string>());
      out += prefix + fmt::format("baseline,,{:.6g},{:.6g}\n",
                                  p.at(budget_key::kBaseline).get<double>(),
                                  number_or_nan(p, budget_key::kBaselineError));
      for (const auto& v : p.at(budget_key::kVariants))
        out += prefix + fmt::format("{},{},{:.6g},{:.4g}\n",
                                    v.at(budget_key::kVariant).get<std::string>(),
                                    v.at(budget_key::kCategory).get<std::string>(),
                                    v.at(budget_key::kShift).get<double>(),
                                    number_or_nan(v, budget_key::kShiftSigma));
      for (const auto& [cat, q] : p.at(budget_key::kCategories).items())
        out += prefix + fmt::format("quadrature,{},{:.6g},\n", cat, q.get<double>());
      out += prefix + fmt::format("total,,{:.6g},\n", p.at(budget_key::kTotal).get<double>());
    }
  }
  return out;
}

}  // namespace

std::string GridOptions::check() const {
  if (catalog_path.empty()) return "grid.catalog: required (an ingested catalog)";
  if (deredden_config.empty()) return "grid.deredden: required (the baseline deredden config)";
  if (fit_config.empty()) return "grid.fit: required (the baseline fit config)";
  if (output_folder.empty()) return "grid.output: required";
  if (bootstrap < 0) return "grid.bootstrap: must be 0 or more";
  if (threads < 0) return "grid.threads: must be 0 (every core) or more";
  if (variants.empty()) return "variant: at least one [[variant]]";
  std::set<std::string> names;
  for (const auto& v : variants) {
    if (v.name.empty() || v.name == "baseline")
      return "variant.name: required, and not \"baseline\"";
    if (!names.insert(v.name).second)
      return fmt::format("variant.name: '{}' is used twice", v.name);
    if (v.category.empty()) return fmt::format("variant.{}.category: required", v.name);
    if (v.r_v && !(*v.r_v > 0)) return fmt::format("variant.{}.r_v: must be positive", v.name);
    if (v.blend_min_mag && !(*v.blend_min_mag >= 0 && *v.blend_min_mag <= 5))
      return fmt::format("variant.{}.blend_min_mag: must be 0 to 5 mag", v.name);
  }
  return "";
}

GridOptions grid_options_from_file(const std::string& path) {
  Config c = Config::from_file(path);
  ConfigSection root = c.root();
  GridOptions o;
  o.config_file = path;
  o.config_sha256 = c.sha256();
  auto g = root.section("grid");
  if (!g)
    throw InputError({path, {}, "grid", "line", "key"}, "config_missing_key",
                     "a [grid] table is required");
  o.catalog_path = c.resolve_path(g->require_string("catalog"));
  o.deredden_config = c.resolve_path(g->require_string("deredden"));
  o.fit_config = c.resolve_path(g->require_string("fit"));
  o.output_folder = c.resolve_path(g->string_or("output", o.output_folder));
  o.bootstrap = static_cast<int>(g->integer_or("bootstrap", o.bootstrap));
  o.threads = static_cast<int>(g->integer_or("threads", o.threads));
  for (const auto& s : root.section_list("variant")) {
    GridVariant v;
    v.name = s.require_string("name");
    v.category = s.require_string("category");
    v.law = choice_if(s, "law", kExtinctionLawNames);
    v.r_v = number_if(s, "r_v");
    v.zero_point = choice_if(s, "zero_point", kZeroPointRecipeNames);
    v.zero_point_mas = number_if(s, "zero_point_mas");
    v.max_ruwe = number_if(s, "max_ruwe");
    v.loss = choice_if(s, "loss", kLossNames);
    v.loss_scale = number_if(s, "loss_scale");
    v.space = choice_if(s, "space", kFitSpaceNames);
    if (s.has("metallicity")) v.metallicity = s.bool_or("metallicity", true);
    v.min_log_period = number_if(s, "min_log_period");
    v.max_log_period = number_if(s, "max_log_period");
    v.inflation = choice_if(s, "inflation", kInflationRecipeNames);
    v.blend_min_mag = number_if(s, "blend_min_mag");
    v.blend_component = choice_if(s, "blend_component", kBlendComponentNames);
    o.variants.push_back(v);
  }
  c.check_unknown_keys();
  throw_if_invalid(o.check(), path);
  return o;
}

std::string grid_result_path(const GridOptions& g) {
  return (std::filesystem::path(g.output_folder) / "grid.json").string();
}

std::string grid_budget_csv_path(const GridOptions& g) {
  return (std::filesystem::path(g.output_folder) / "error_budget.csv").string();
}

StageFiles declared_files(const GridOptions& g) {
  StageFiles f;
  f.add_input(g.catalog_path);
  f.add_input(g.deredden_config);
  f.add_input(g.fit_config);
  const DereddenOptions dered = deredden_options_from_file(g.deredden_config);
  StageFiles dered_files = declared_files(dered);
  dered_files.drop_input(dered.input_path);
  f.add_inputs_of(dered_files);
  const FitOptions fit = fit_options_from_file(g.fit_config);
  StageFiles fit_files = declared_files(fit);
  fit_files.drop_input(fit.input_path);
  f.add_inputs_of(fit_files);
  f.outputs = {grid_result_path(g), grid_budget_csv_path(g)};
  return f;
}

GridResult run_grid(const GridOptions& g) {
  throw_if_invalid(g.check(), g.config_file);
  const DereddenOptions base_dered = deredden_options_from_file(g.deredden_config);
  const FitOptions base_fit = fit_options_from_file(g.fit_config);
  const SourceTable catalog = read_fits_table(g.catalog_path, {catalog_hdu::kCatalog, 0});
  const BandTable bands = BandTable::from_file(base_dered.bands_file);

  // Every variant's fit from the same catalog; the baseline is index 0.
  std::vector<FitResult> fits(g.variants.size() + 1);
  const DereddenResult base_dr = run_deredden(base_dered, catalog.table, bands);
  const StarTable base_coeffs = base_dr.coefficients_table();
  warn_of_blend_variants_without_blends(g, base_fit);
  Progress progress("systematics grid", fits.size());
  distributed_for(
      fits.size(), worker_threads(g.threads),
      [&](std::size_t i) {
        // Under MPI the variants are split across ranks; each variant's bootstrap stays here.
        LocalWorkScope local;
        const GridVariant* v = i == 0 ? nullptr : &g.variants[i - 1];
        const FitOptions fo = fit_options_for(g, base_fit, v);
        if (v && v->changes_extinction()) {
          const DereddenResult dr =
              run_deredden(deredden_options_for(base_dered, *v), catalog.table, bands);
          const StarTable coeffs = dr.coefficients_table();
          fits[i] = run_fit(fo, dr.catalog, &coeffs);
        } else {
          fits[i] = run_fit(fo, base_dr.catalog, &base_coeffs);
        }
        progress.advance();
      },
      [&](std::size_t i) { return encode_budget_fields(fits[i]); },
      [&](std::size_t i, const std::string& bytes) { fits[i] = decode_budget_fields(bytes); });
  progress.finish();
  GridResult result;
  result.baseline = std::move(fits[0]);
  result.variants.assign(std::make_move_iterator(fits.begin() + 1),
                         std::make_move_iterator(fits.end()));
  result.budget = error_budget(g, result);
  return result;
}

nlohmann::json error_budget(const GridOptions& g, const GridResult& r) {
  nlohmann::json out;
  out[budget_key::kSchema] = kErrorBudgetSchemaName;
  out[budget_key::kSchemaVersion] = 1;
  out[budget_key::kRelations] = nlohmann::json::array();
  for (const auto& base : r.baseline.relations) {
    nlohmann::json rel;
    rel[budget_key::kName] = base.relation.name;
    rel[budget_key::kParameters] = nlohmann::json::array();
    for (std::size_t j = 0; j < base.layout.names.size(); ++j) {
      const std::string& pname = base.layout.names[j];
      if (base.settings.params[j].mode == ParamMode::kFixed) continue;
      nlohmann::json p;
      const double value = base.parameter(pname), error = base.error(pname);
      p[budget_key::kName] = pname;
      p[budget_key::kBaseline] = value;
      p[budget_key::kBaselineError] =
          std::isfinite(error) ? nlohmann::json(error) : nlohmann::json(nullptr);
      p[budget_key::kVariants] = nlohmann::json::array();
      std::map<std::string, double> sum2;
      for (std::size_t k = 0; k < g.variants.size(); ++k) {
        const RelationResult* vr = find_relation(r.variants[k], base.relation.name);
        if (!vr || !has_parameter(*vr, pname)) continue;  // e.g. gamma with the term off
        const double shift = vr->parameter(pname) - value;
        nlohmann::json row = {{budget_key::kVariant, g.variants[k].name},
                              {budget_key::kCategory, g.variants[k].category},
                              {budget_key::kShift, shift}};
        row[budget_key::kShiftSigma] = std::isfinite(error) && error > 0
                                           ? nlohmann::json(shift / error)
                                           : nlohmann::json(nullptr);
        p[budget_key::kVariants].push_back(row);
        sum2[g.variants[k].category] += shift * shift;
      }
      double total2 = 0;
      p[budget_key::kCategories] = nlohmann::json::object();
      for (const auto& [cat, s2] : sum2) {
        p[budget_key::kCategories][cat] = std::sqrt(s2);
        total2 += s2;
      }
      p[budget_key::kTotal] = std::sqrt(total2);
      rel[budget_key::kParameters].push_back(p);
    }
    out[budget_key::kRelations].push_back(rel);
  }
  return out;
}

GridResult run_grid_files(const GridOptions& g) {
  GridResult r = run_grid(g);
  if (!Cluster::world().writes_outputs()) return r;
  nlohmann::json doc = r.budget;
  Provenance prov = Provenance::for_stage("grid");
  prov.config_sha256 = g.config_sha256;
  prov.inputs.push_back({g.catalog_path, sha256_file(g.catalog_path), -1});
  doc[budget_key::kProvenance] = {
      {"stage", prov.stage},
      {"software_version", prov.software_version},
      {"software_commit", prov.software_commit},
      {"created_utc", prov.created_utc},
      {"config_sha256", prov.config_sha256},
      {"inputs", {{{"path", g.catalog_path}, {"sha256", prov.inputs[0].sha256}}}}};
  nlohmann::json variants = nlohmann::json::array();
  // changes_extinction: the variant moves every dereddened magnitude, the targets' too.
  for (const auto& v : g.variants)
    variants.push_back({{budget_key::kName, v.name},
                        {budget_key::kCategory, v.category},
                        {budget_key::kChangesExtinction, v.changes_extinction()}});
  doc[budget_key::kVariants] = variants;
  write_file_atomically(grid_result_path(g), doc.dump(2) + "\n");
  write_file_atomically(grid_budget_csv_path(g), csv_of_budget(r.budget));
  return r;
}

}  // namespace rungcal
