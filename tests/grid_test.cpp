// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/grid (rungcal-grid): the baseline row is the plain fit; an R_V
// variant shifts the zero point by what the extinction coefficients predict; the report
// renders the budget. Data: the demo's simulated calibrators (known truth).
#include <gtest/gtest.h>

#include <cmath>
#include <map>

#include <fmt/format.h>
#include <Eigen/Dense>

#include "rungcal/deredden/deredden.hpp"
#include "rungcal/grid/grid.hpp"
#include "rungcal/photometry/bands.hpp"
#include "rungcal/report/tables.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// The demo catalog, ingested into dir/cat.fits; with exact E(B-V) (errors 0) when asked,
// so that a star's weight does not depend on the extinction coefficient.
std::string ingested_catalog(const test::TempDir& dir, bool exact_ebv) {
  auto r = test::run_stage("ingest", "--config " + test::source_file("config/demo/ingest.toml") +
                                         " --out " + dir.file("cat.fits"));
  EXPECT_EQ(r.exit_code, 0) << r.output;
  if (!exact_ebv) return dir.file("cat.fits");
  SourceTable t = read_fits_table(dir.file("cat.fits"), {"CATALOG", 0});
  for (double& e : t.table.column("ebv_err").real) e = 0.0;
  write_fits_tables(dir.file("cat_exact.fits"), {{"CATALOG", &t.table}});
  return dir.file("cat_exact.fits");
}

GridOptions grid_options(const test::TempDir& dir, const std::string& catalog,
                         const std::string& fit_config) {
  GridOptions g;
  g.catalog_path = catalog;
  g.deredden_config = test::source_file("config/demo/deredden.toml");
  g.fit_config = fit_config;
  g.output_folder = dir.file("grid");
  g.threads = 2;
  GridVariant rv;
  rv.name = "rv_3.3";
  rv.category = "extinction";
  rv.r_v = 3.3;
  GridVariant ruwe;
  ruwe.name = "ruwe_1.2";
  ruwe.category = "quality cuts";
  ruwe.max_ruwe = 1.2;
  g.variants = {rv, ruwe};
  return g;
}

TEST(Grid, BaselineRowIsThePlainFit) {
  test::TempDir dir;
  const std::string catalog = ingested_catalog(dir, false);
  GridOptions g = grid_options(dir, catalog, test::source_file("config/demo/fit.toml"));
  GridResult grid = run_grid(g);
  // The plain fit: deredden and fit as the stages do, bootstrap off as in the grid.
  DereddenOptions d = deredden_options_from_file(g.deredden_config);
  DereddenResult dr = run_deredden(d, read_fits_table(catalog, {"CATALOG", 0}).table,
                                   BandTable::from_file(d.bands_file));
  FitOptions f = fit_options_from_file(g.fit_config);
  f.bootstrap = 0;
  f.threads = 1;
  StarTable coeffs = dr.coefficients_table();
  FitResult plain = run_fit(f, dr.catalog, &coeffs);
  ASSERT_EQ(plain.relations.size(), grid.baseline.relations.size());
  for (std::size_t r = 0; r < plain.relations.size(); ++r)
    for (const auto& name : plain.relations[r].layout.names)
      EXPECT_EQ(grid.baseline.relations[r].parameter(name), plain.relations[r].parameter(name))
          << name;
  // The budget's baseline is that fit too, and every variant has a row.
  const auto& p0 = grid.budget["relations"][0]["parameters"][0];
  EXPECT_EQ(p0["baseline"].get<double>(), plain.relations[0].parameter("alpha"));
  EXPECT_EQ(p0["variants"].size(), 2u);
}

TEST(Grid, AnRvVariantShiftsTheZeroPointByWhatTheCoefficientsPredict) {
  // One V-band relation, magnitude space, no robust loss, scatter and offset fixed: a
  // weighted linear fit. With exact E(B-V) the weights do not depend on R_V, so the shift of
  // (alpha, beta) is exactly -dR_V times the weighted regression of E(B-V) on (1, x), with
  // dR_V = R_V(3.3) - R_V(3.1) of the band under the law (Fitzpatrick 1999 coefficients).
  test::TempDir dir;
  const std::string catalog = ingested_catalog(dir, true);
  test::write_text(dir.file("fit.toml"), R"([fit]
input = "unused.fits"
space = "magnitude"
loss = "none"
zero_point = "none"
offset = { mode = "fixed", value = 0.0 }
scatter = { mode = "fixed", value = 0.1 }
[[relation]]
name = "V"
band = "V"
)");
  GridOptions g = grid_options(dir, catalog, dir.file("fit.toml"));
  GridResult grid = run_grid(g);
  const RelationResult& base = grid.baseline.relations[0];
  const RelationResult& rv = grid.variants[0].relations[0];

  DereddenOptions d = deredden_options_from_file(g.deredden_config);
  const BandTable bands = BandTable::from_file(d.bands_file);
  const double dR = band_coefficient(*bands.find("V"), d.law, 3.3) -
                    band_coefficient(*bands.find("V"), d.law, d.r_v);
  SourceTable cat = read_fits_table(catalog, {"CATALOG", 0});
  std::map<std::string, double> ebv;
  for (std::size_t i = 0; i < cat.table.rows(); ++i)
    ebv[cat.table.column("id").text[i]] = cat.table.column("ebv").real[i];
  // The weighted regression of E(B-V) on (1, log P - pivot) over the stars the fit used.
  Eigen::Matrix2d a = Eigen::Matrix2d::Zero();
  Eigen::Vector2d b = Eigen::Vector2d::Zero();
  const double k = 5.0 / std::log(10.0);
  int used = 0;
  for (const auto& s : base.stars) {
    if (!s.used) continue;
    ++used;
    const double var = s.m0_err * s.m0_err + std::pow(k * s.plx_err / s.plx, 2) + 0.1 * 0.1;
    const Eigen::Vector2d row(1.0, s.log_period - base.relation.pivot_log_period);
    a += row * row.transpose() / var;
    b += row * ebv.at(s.id) / var;
  }
  ASSERT_GT(used, 50);
  const Eigen::Vector2d predicted = -dR * a.ldlt().solve(b);
  EXPECT_GT(std::abs(predicted(0)), 0.05);  // a real shift, not a rounding
  EXPECT_NEAR(rv.parameter("alpha") - base.parameter("alpha"), predicted(0), 1e-6);
  EXPECT_NEAR(rv.parameter("beta") - base.parameter("beta"), predicted(1), 1e-6);
}

TEST(Grid, ReportRendersTheBudgetInEachFormat) {
  test::TempDir dir;
  const std::string catalog = ingested_catalog(dir, false);
  GridOptions g = grid_options(dir, catalog, test::source_file("config/demo/fit.toml"));
  GridResult grid = run_grid_files(g);
  ASSERT_TRUE(test::file_exists(dir.file("grid/grid.json")));
  ASSERT_TRUE(test::file_exists(dir.file("grid/error_budget.csv")));
  const std::string md = error_budget_table(grid.budget, TableFormat::kMarkdown);
  EXPECT_NE(md.find("| W_VI: zero point alpha (mag)"), std::string::npos)
      << md;  // readable names (issue 20)
  EXPECT_NE(md.find("extinction"), std::string::npos);
  EXPECT_NE(md.find("quality cuts"), std::string::npos);
  // The total is the quadrature sum of the categories, as printed.
  const auto& p = grid.budget["relations"][0]["parameters"][0];
  const double e = p["categories"]["extinction"].get<double>(),
               q = p["categories"]["quality cuts"].get<double>();
  EXPECT_NEAR(p["total"].get<double>(), std::hypot(e, q), 1e-12);
  const std::string tex = error_budget_table(grid.budget, TableFormat::kLatex);
  EXPECT_NE(tex.find("\\begin{deluxetable"), std::string::npos);
  EXPECT_NE(tex.find(fmt::format("{:.4f}", q)), std::string::npos)
      << tex;  // alpha's error 0.07x: shifts to 4 decimals
}

TEST(Grid, BlendModelVariantsReachTheHierarchicalFit) {
  // The blend component's start and law as analysis choices (docs/simulation-history.md, "The blend
  // law near its start"): read from [[variant]] and handed to that variant's fit only.
  test::TempDir dir;
  const std::string catalog = ingested_catalog(dir, false);
  test::write_text(dir.file("g.toml"),
                   fmt::format("[grid]\ncatalog = \"{}\"\nderedden = \"{}\"\nfit = \"{}\"\n"
                               "output = \"{}\"\nthreads = 2\n"
                               "[[variant]]\nname = \"blend_start_0.5\"\ncategory = \"blends\"\n"
                               "blend_min_mag = 0.5\n"
                               "[[variant]]\nname = \"blend_exponential\"\ncategory = \"blends\"\n"
                               "blend_component = \"exponential\"\n",
                               catalog, test::source_file("config/demo/deredden.toml"),
                               test::source_file("config/demo/fit.toml"), dir.file("grid")));
  const GridOptions g = grid_options_from_file(dir.file("g.toml"));
  ASSERT_EQ(g.variants.size(), 2u);
  EXPECT_EQ(g.variants[0].blend_min_mag, 0.5);
  EXPECT_FALSE(g.variants[0].blend_component.has_value());
  EXPECT_EQ(g.variants[1].blend_component, BlendComponent::kExponential);
  const GridResult grid = run_grid(g);
  const HierarchicalSettings& base = grid.baseline.relations[0].settings.hierarchical;
  const HierarchicalSettings& start = grid.variants[0].relations[0].settings.hierarchical;
  const HierarchicalSettings& law = grid.variants[1].relations[0].settings.hierarchical;
  // The demo fit keeps the model's defaults (model.hpp): a rising component from 0.3 mag.
  EXPECT_EQ(base.blend_min_mag, 0.3);
  EXPECT_EQ(base.blends, BlendComponent::kRising);
  EXPECT_EQ(start.blend_min_mag, 0.5);
  EXPECT_EQ(start.blends, BlendComponent::kRising);
  EXPECT_EQ(law.blend_min_mag, 0.3);
  EXPECT_EQ(law.blends, BlendComponent::kExponential);
  // Both rows are in the budget, under their category.
  const auto& alpha = grid.budget["relations"][0]["parameters"][0];
  ASSERT_EQ(alpha["variants"].size(), 2u);
  EXPECT_TRUE(std::isfinite(alpha["variants"][0]["shift"].get<double>()));
  EXPECT_TRUE(alpha["categories"].contains("blends"));
}

TEST(Grid, BadGridConfigStopsWithItsRule) {
  test::TempDir dir;
  test::write_text(dir.file("g.toml"),
                   "[grid]\ncatalog = \"c.fits\"\nderedden = \"d.toml\"\nfit = \"f.toml\"\n"
                   "[[variant]]\nname = \"x\"\ncategory = \"extinction\"\nlaw = \"ccm98\"\n");
  auto r = test::run_stage("grid", "--config " + dir.file("g.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[config_value]"), std::string::npos) << r.output;
  test::write_text(dir.file("g.toml"),
                   "[grid]\ncatalog = \"c.fits\"\nderedden = \"d.toml\"\nfit = \"f.toml\"\n");
  r = test::run_stage("grid", "--config " + dir.file("g.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("variant"), std::string::npos) << r.output;
  test::write_text(dir.file("g.toml"),
                   "[grid]\ncatalog = \"c.fits\"\nderedden = \"d.toml\"\nfit = \"f.toml\"\n"
                   "[[variant]]\nname = \"x\"\ncategory = \"blends\"\nblend_min_mag = -0.1\n");
  r = test::run_stage("grid", "--config " + dir.file("g.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("key 'variant.x.blend_min_mag': [config_value] must be 0 to 5 mag"),
            std::string::npos)
      << r.output;
  test::write_text(dir.file("g.toml"),
                   "[grid]\ncatalog = \"c.fits\"\nderedden = \"d.toml\"\nfit = \"f.toml\"\n"
                   "[[variant]]\nname = \"x\"\ncategory = \"blends\"\n"
                   "blend_component = \"gamma3\"\n");
  r = test::run_stage("grid", "--config " + dir.file("g.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("blend_component"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace rungcal
