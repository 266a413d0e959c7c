// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/table/ecsv_io: ECSV tables written by astropy (Debian
// python3-astropy) read with their types, units and nulls; bad files name their rule; the
// Milky Way Cepheids of Riess et al. 2018 (ApJ 861, 126) ingest the same from ECSV as from
// the published text table, with the same column map.
#include <gtest/gtest.h>

#include <cmath>

#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/ecsv_io.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"
#include "rungcal/table/units.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

std::string rule_of(const std::string& content) {
  try {
    parse_ecsv_table(content, "t.ecsv");
  } catch (const InputError& e) {
    return e.rule() + " | " + e.what();
  }
  return "accepted";
}

TEST(Ecsv, ArrayColumnsAskedForAreReadPerRow) {
  // ECSV 1.0 (astropy APE 6): a variable-length array column has datatype string and a
  // subtype such as float64[null], each cell a JSON array; astropy writes NaN as NaN and a
  // masked element as null.
  const std::string content =
      "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: id, datatype: int64}\n"
      "# - {name: t, unit: d, datatype: string, subtype: 'float64[null]'}\n"
      "# - {name: rej, datatype: string, subtype: 'bool[null]'}\n"
      "id t rej\n"
      "1 [1.5,2.25,null,NaN] [true,false,false,true]\n"
      "2 \"[ 3e2 , -1 ]\" [false,false]\n"
      "3 [] []\n";
  EXPECT_EQ(parse_ecsv_table(content, "t.ecsv").unusable_columns.count("t"), 1u);
  const SourceTable s = parse_ecsv_table(content, "t.ecsv", {"t", "rej"});
  const auto& t = s.arrays.at("t");
  EXPECT_EQ(t.unit, "d");
  ASSERT_EQ(t.rows.size(), 3u);
  ASSERT_EQ(t.rows[0].size(), 4u);
  EXPECT_EQ(t.rows[0][1], 2.25);
  EXPECT_TRUE(std::isnan(t.rows[0][2]) && std::isnan(t.rows[0][3]));
  EXPECT_EQ(t.rows[1], (std::vector<double>{300.0, -1.0}));
  EXPECT_TRUE(t.rows[2].empty());
  EXPECT_TRUE(s.arrays.at("rej").logical);
  EXPECT_EQ(s.arrays.at("rej").rows[0], (std::vector<double>{1, 0, 0, 1}));
  // A cell that is not a flat JSON array of the subtype's values: its line and column.
  for (const char* bad : {"[1.5,[2]]", "[1.5,x]", "1.5", "[1.5,]", "[true]"}) {
    try {
      parse_ecsv_table(test::replaced(content, {{"[1.5,2.25,null,NaN]", bad}}), "t.ecsv", {"t"});
      ADD_FAILURE() << bad << " accepted";
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "ecsv_value") << bad;
      EXPECT_NE(std::string(e.what()).find("t.ecsv:line 8: column 't'"), std::string::npos)
          << e.what();
    }
  }
}

TEST(Ecsv, RungcalReadsWhatAstropyWrites) {
  // Reference: astropy.table.Table.write(format="ascii.ecsv"), space and comma delimiters.
  test::TempDir dir;
  auto r = test::run_python(R"(
import sys, numpy as np
from astropy.table import Table, MaskedColumn
import astropy.units as u
t = Table()
t["name"] = ["Vell 1", "Vell-2", 'Vell "3"']
t["plx"] = np.array([0.5, np.nan, -0.125]) * u.mas
t["plx_uas"] = np.array([500.0, 10.0, -125.0]) * u.uas
t["n"] = MaskedColumn([3, 4, 5], mask=[False, True, False], dtype=np.int32)
t["nu"] = np.array([1.5, 1.4, 1.6]) / u.um
t["note"] = MaskedColumn(["a", "b b", "c"], mask=[False, False, True])
t["ok"] = [True, False, True]
t.meta["observatory"] = "Mount Vellin"
t.write(sys.argv[1], format="ascii.ecsv")
t.write(sys.argv[2], format="ascii.ecsv", delimiter=",")
)",
                            {dir.file("a.ecsv"), dir.file("c.ecsv")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  for (const char* f : {"a.ecsv", "c.ecsv"}) {
    ASSERT_TRUE(looks_like_ecsv(dir.file(f)));
    SourceTable t = read_ecsv_table(dir.file(f));
    ASSERT_EQ(t.table.rows(), 3u) << f;
    EXPECT_EQ(t.table.column("name").text,
              (std::vector<std::string>{"Vell 1", "Vell-2", "Vell \"3\""}));
    EXPECT_DOUBLE_EQ(t.table.column("plx").real[0], 0.5);
    EXPECT_TRUE(t.table.column("plx").is_null(1));
    EXPECT_EQ(t.table.column("plx").unit, "mas");
    EXPECT_DOUBLE_EQ(
        unit_conversion(QuantityKind::kParallax, t.table.column("plx_uas").unit)->apply(500.0),
        0.5);
    EXPECT_EQ(t.table.column("n").type, ColumnType::kInteger);
    EXPECT_TRUE(t.table.column("n").is_null(1));
    EXPECT_EQ(t.table.column("n").integer[2], 5);
    EXPECT_TRUE(unit_conversion(QuantityKind::kWavenumber, t.table.column("nu").unit).has_value());
    EXPECT_EQ(t.table.column("note").text[1], "b b");
    EXPECT_TRUE(t.table.column("note").is_null(2));
    EXPECT_EQ(t.table.column("ok").boolean, (std::vector<std::uint8_t>{1, 0, 1}));
    // File lines: 13 header lines and the column names (a comma file states its delimiter).
    const std::int64_t first = std::string(f) == "a.ecsv" ? 15 : 16;
    EXPECT_EQ(t.source_rows, (std::vector<std::int64_t>{first, first + 1, first + 2})) << f;
    EXPECT_EQ(t.row_label, "line");
  }
}

TEST(Ecsv, BadFilesNameTheirRuleAndLine) {
  const std::string head =
      "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: id, datatype: string}\n"
      "# - {name: plx, unit: mas, datatype: float64}\n# schema: astropy-2.0\n";
  EXPECT_EQ(rule_of(head + "id plx\nA 0.5\n").substr(0, 8), "accepted");
  EXPECT_EQ(rule_of("id plx\nA 0.5\n"),
            "ecsv_header | t.ecsv:line 1: [ecsv_header] not an ECSV file: the first line is not "
            "'# %ECSV <version>'");
  // Malformed YAML: an unclosed flow mapping.
  EXPECT_EQ(rule_of("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: id, datatype: string\nid\nA\n")
                .substr(0, 11),
            "ecsv_header");
  // The header lies about the columns: it lists id, plx; the data names id, parallax.
  EXPECT_EQ(rule_of(head + "id parallax\nA 0.5\n"),
            "ecsv_header | t.ecsv:line 7: [ecsv_header] the YAML header lists the columns id, plx "
            "but the column-name line has id, parallax");
  // ... or about a column's type.
  EXPECT_EQ(rule_of(head + "id plx\nA 0.5\nB high\n"),
            "ecsv_value | t.ecsv:line 9: column 'plx': [ecsv_value] 'high' is not a float64 value, "
            "which the header says the column holds");
  EXPECT_EQ(rule_of(head + "id plx\nA 0.5 7\n").substr(0, 11), "field_count");
  EXPECT_EQ(rule_of(head + "id plx\n\"A 0.5\n").substr(0, 18), "unterminated_quote");
  EXPECT_EQ(rule_of("# %ECSV 1.0\n# ---\n# schema: astropy-2.0\nid\nA\n").substr(0, 11),
            "ecsv_header");
  EXPECT_EQ(rule_of("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: id, datatype: complex64}\nid\nA\n")
                .substr(0, 11),
            "ecsv_header");
  // An array column is listed as unusable with its reason, and the rest reads.
  SourceTable t = parse_ecsv_table(
      "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: id, datatype: string}\n"
      "# - {name: g, datatype: string, subtype: 'float64[3]'}\nid g\nA [1.0,2.0,3.0]\n",
      "t.ecsv");
  EXPECT_EQ(t.table.rows(), 1u);
  EXPECT_FALSE(t.table.has("g"));
  EXPECT_NE(t.unusable_columns.at("g").find("array column"), std::string::npos);
}

// The Riess et al. 2018 table (ApJ 861, 126) as astropy would hand it over: the published
// text split on runs of two or more spaces, "xxx" masked, units on the columns.
const char* kRiessToEcsv = R"(
import sys, re, numpy as np
from astropy.table import Table, MaskedColumn
import astropy.units as u
lines = open(sys.argv[1], encoding="utf-8").read().splitlines()
names = re.split(r"\s{2,}", lines[0].lstrip("#").strip())
rows = [re.split(r"\s{2,}", l.strip()) for l in lines[1:] if l.strip()]
units = {"parallax": u.mas, "parallax_error": u.mas, "ra": u.deg, "dec": u.deg,
         "astrometric_pseudo_colour": 1 / u.um, "astrometric_excess_noise": u.mas}
t = Table()
for i, n in enumerate(names):
    vals = [r[i] for r in rows]
    mask = [v == "xxx" for v in vals]
    try:
        data = [float(v) if v != "xxx" else 0.0 for v in vals]
        if n in ("FinalAnalysisFlag", "astrometric_params_solved"):
            data = [int(v) for v in data]
    except ValueError:
        data = [v if v != "xxx" else "" for v in vals]
    unit = units.get(n, u.mag if n.startswith(("F", "m")) and n not in ("FinalAnalysisFlag",) and "nepoch" not in n else None)
    t[n] = MaskedColumn(data, mask=mask, unit=unit)
t.write(sys.argv[2] + ".ecsv", format="ascii.ecsv")
t.write(sys.argv[2] + ".vot", format="votable")
t.write(sys.argv[2] + ".fits", format="fits")
)";

TEST(Ecsv, RiessCepheidsIngestTheSameFromEcsvVOTableAndFitsAsFromThePublishedText) {
  test::TempDir dir;
  auto py = test::run_python(kRiessToEcsv,
                             {test::reference_file("mw_cepheids_hst_gaiadr2.txt"), dir.file("mw")});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  const std::string text_config = test::replaced(
      test::read_text(test::source_file("config/reference/mw_cepheids_hst_gaiadr2.toml")),
      {{"../../../shared/reference/", test::reference_file("") + "/"}});
  test::write_text(dir.file("text.toml"), text_config);
  IngestResult from_text = run_ingest(ingest_options_from_file(dir.file("text.toml")));
  const StarTable& a = from_text.catalog;
  for (const std::string format : {"ecsv", "vot", "fits"}) {
    SCOPED_TRACE(format);
    // The same column map; only the path differs (the text keys are not used by the others;
    // the format follows the file: ECSV's first line, .vot, .fits).
    test::write_text(
        dir.file(format + ".toml"),
        test::replaced(text_config,
                       {{test::reference_file("") + "/mw_cepheids_hst_gaiadr2.txt", "mw." + format},
                        {"format = \"text\"\n", format == "ecsv" ? "format = \"text\"\n" : ""}}));
    IngestResult from_other = run_ingest(ingest_options_from_file(dir.file(format + ".toml")));
    const StarTable& b = from_other.catalog;
    ASSERT_EQ(a.rows(), 46u);  // 50 stars, 4 flagged out of the final analysis
    ASSERT_EQ(b.rows(), a.rows());
    EXPECT_EQ(b.column_names(), a.column_names());
    for (const auto& name : a.column_names()) {
      if (name == col::kSourceRow) continue;  // the files' own line numbers
      const Column& x = a.column(name);
      const Column& y = b.column(name);
      EXPECT_EQ(y.unit, x.unit) << name;
      for (std::size_t i = 0; i < a.rows(); ++i) {
        EXPECT_EQ(y.is_null(i), x.is_null(i)) << name << " " << i;
        // Extra columns keep the input's type: text from the text table, numbers from the others.
        double vx = 0, vy = 0;
        if (parse_real(x.to_string(i), vx) && parse_real(y.to_string(i), vy))
          EXPECT_DOUBLE_EQ(vy, vx) << name << " " << i;
        else
          EXPECT_EQ(y.to_string(i), x.to_string(i)) << name << " " << i;
      }
    }
    // Riess et al. 2018, AA GEM: parallax 0.18780788545791 mas (Gaia DR2), LogPeriod 1.053.
    EXPECT_DOUBLE_EQ(b.column(col::kParallax).real[0], 0.18780788545791);
    EXPECT_NEAR(b.column(col::kLogPeriod).real[0], 1.053, 1e-12);
  }
}

TEST(Ecsv, TheFilesUnitsAreCheckedAgainstTheMappedQuantity) {
  test::TempDir dir;
  const std::string head =
      "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: id, datatype: string}\n"
      "# - {name: P, unit: d, datatype: float64}\n"
      "# - {name: plx, unit: UNIT, datatype: float64}\n"
      "# - {name: V, unit: mag, datatype: float64}\n# schema: astropy-2.0\n"
      "id P plx V\nVell-1 5.0 400 12.1\nVell-2 7.0 300 11.5\nVell-3 9.0 500 11.2\n";
  const std::string config =
      "[source]\npath = \"in.ecsv\"\n[columns]\nid = \"id\"\nperiod = \"P\"\nparallax = PLX\n"
      "mode = { value = \"fundamental\" }\npulsator_class = { value = \"classical_cepheid\" }\n"
      "[bands.V]\nmag = \"V\"\nerr = 0.02\n[validate]\nrequire_errors = false\n"
      "[output]\ncatalog = \"out/c.fits\"\n";
  auto run = [&](const std::string& unit, const std::string& plx) {
    test::write_text(dir.file("in.ecsv"), test::replaced(head, {{"UNIT", unit}}));
    test::write_text(dir.file("c.toml"), test::replaced(config, {{"PLX", plx}}));
    return test::run_stage("ingest", "--config " + dir.file("c.toml"));
  };
  // The file says uas: converted to mas.
  auto r = run("uas", "\"plx\"");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  StarTable cat = read_fits_table(dir.file("out/c.fits"), {"CATALOG", 0}).table;
  EXPECT_DOUBLE_EQ(cat.column(col::kParallax).real[0], 0.4);
  // The file says uas, the config mas: refused rather than guessed.
  r = run("uas", "{ column = \"plx\", unit = \"mas\" }");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[unit_conflict]"), std::string::npos) << r.output;
  // A unit that is no parallax unit.
  r = run("deg", "\"plx\"");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("in.ecsv"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("[bad_unit] unit 'deg' is not a unit for parallax"), std::string::npos)
      << r.output;
}

}  // namespace
}  // namespace rungcal
