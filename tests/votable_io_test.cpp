// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/table/votable_io: VOTables written by astropy (Debian
// python3-astropy, astropy.io.votable) read with their types, units and nulls; bad files
// name their rule and line.
#include <gtest/gtest.h>

#include <cmath>

#include "rungcal/core/error.hpp"
#include "rungcal/table/units.hpp"
#include "rungcal/table/votable_io.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

std::string rule_of(const std::string& content) {
  try {
    parse_votable_table(content, "t.vot");
  } catch (const InputError& e) {
    return e.rule() + " | " + e.what();
  }
  return "accepted";
}

TEST(VOTable, RungcalReadsWhatAstropyWrites) {
  // Reference: astropy.table.Table.write(format="votable"), TABLEDATA serialization.
  test::TempDir dir;
  auto r = test::run_python(R"(
import sys, numpy as np
from astropy.table import Table, MaskedColumn
import astropy.units as u
t = Table()
t["name"] = ["Vell 1", "Vell-2", "Vell<3>"]
t["plx"] = np.array([0.5, np.nan, -0.125]) * u.mas
t["plx_uas"] = np.array([500.0, 10.0, -125.0]) * u.uas
t["n"] = MaskedColumn([3, 4, 5], mask=[False, True, False], dtype=np.int32)
t["note"] = MaskedColumn(["a", "b b", "c"], mask=[False, False, True])
t["ok"] = [True, False, True]
t["g"] = [[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]]
t.write(sys.argv[1], format="votable")
t[["name", "plx"]].write(sys.argv[2], format="votable", tabledata_format="binary")
)",
                            {dir.file("a.vot"), dir.file("b.vot")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  ASSERT_TRUE(has_votable_extension(dir.file("a.vot")));
  SourceTable t = read_votable_table(dir.file("a.vot"));
  ASSERT_EQ(t.table.rows(), 3u);
  EXPECT_EQ(t.table.column("name").text, (std::vector<std::string>{"Vell 1", "Vell-2", "Vell<3>"}));
  EXPECT_DOUBLE_EQ(t.table.column("plx").real[0], 0.5);
  EXPECT_TRUE(t.table.column("plx").is_null(1));
  EXPECT_EQ(t.table.column("plx").unit, "mas");
  EXPECT_DOUBLE_EQ(
      unit_conversion(QuantityKind::kParallax, t.table.column("plx_uas").unit)->apply(500.0), 0.5);
  EXPECT_EQ(t.table.column("n").type, ColumnType::kInteger);
  EXPECT_TRUE(t.table.column("n").is_null(1));
  EXPECT_EQ(t.table.column("n").integer[2], 5);
  EXPECT_EQ(t.table.column("note").text[1], "b b");
  EXPECT_TRUE(t.table.column("note").is_null(2));
  EXPECT_EQ(t.table.column("ok").boolean, (std::vector<std::uint8_t>{1, 0, 1}));
  EXPECT_FALSE(t.table.has("g"));
  EXPECT_NE(t.unusable_columns.at("g").find("array column"), std::string::npos);
  EXPECT_EQ(t.row_label, "line");
  ASSERT_EQ(t.source_rows.size(), 3u);
  EXPECT_LT(t.source_rows[0], t.source_rows[1]);
  // The same columns in the BINARY serialization (tests/votable_binary_test.cpp has the rest).
  const SourceTable b = read_votable_table(dir.file("b.vot"));
  EXPECT_EQ(b.table.column("name").text, t.table.column("name").text);
  EXPECT_EQ(b.table.column("plx").real[2], -0.125);
  EXPECT_TRUE(b.table.column("plx").is_null(1));
  EXPECT_EQ(b.row_label, "row");
}

TEST(VOTable, NullValuesAndTypesFromTheFields) {
  // As the Gaia archive writes integers: a VALUES null marker.
  SourceTable t = parse_votable_table(
      "<?xml version=\"1.0\"?>\n<VOTABLE><RESOURCE><TABLE>\n"
      "<FIELD name=\"source_id\" datatype=\"long\"/>\n"
      "<FIELD name=\"astrometric_params_solved\" datatype=\"short\"><VALUES null=\"-1\"/></FIELD>\n"
      "<FIELD name=\"parallax\" datatype=\"double\" unit=\"mas\"/>\n"
      "<FIELD name=\"flag\" datatype=\"boolean\"/>\n"
      "<DATA><TABLEDATA>\n"
      "<TR><TD>4295806720</TD><TD>31</TD><TD> 1.25 </TD><TD>T</TD></TR>\n"
      "<TR><TD>4295806721</TD><TD>-1</TD><TD></TD><TD>?</TD></TR>\n"
      "</TABLEDATA></DATA></TABLE></RESOURCE></VOTABLE>\n",
      "t.vot");
  ASSERT_EQ(t.table.rows(), 2u);
  EXPECT_EQ(t.table.column("source_id").integer[1], 4295806721);
  EXPECT_EQ(t.table.column("astrometric_params_solved").integer[0], 31);
  EXPECT_TRUE(t.table.column("astrometric_params_solved").is_null(1));
  EXPECT_DOUBLE_EQ(t.table.column("parallax").real[0], 1.25);
  EXPECT_TRUE(t.table.column("parallax").is_null(1));
  EXPECT_TRUE(t.table.column("flag").is_null(1));
  EXPECT_EQ(t.source_rows, (std::vector<std::int64_t>{8, 9}));  // the TR lines
}

TEST(VOTable, ArrayColumnsAskedForAreReadPerRow) {
  // VOTable 1.4, section 6.1: a TABLEDATA array's elements are separated by whitespace; a
  // bit array may run together ("1001"); NaN and the VALUES null marker are nulls.
  const std::string content =
      "<?xml version=\"1.0\"?>\n<VOTABLE><RESOURCE><TABLE>\n"
      "<FIELD name=\"source_id\" datatype=\"long\"/>\n"
      "<FIELD name=\"t\" datatype=\"double\" arraysize=\"*\" unit=\"d\"/>\n"
      "<FIELD name=\"n\" datatype=\"int\" arraysize=\"*\"><VALUES null=\"-9\"/></FIELD>\n"
      "<FIELD name=\"rej\" datatype=\"bit\" arraysize=\"*\"/>\n"
      "<FIELD name=\"ok\" datatype=\"boolean\" arraysize=\"*\"/>\n"
      "<DATA><TABLEDATA>\n"
      "<TR><TD>1</TD><TD> 1.5  2.25\nNaN </TD><TD>3 -9 4</TD><TD>1001</TD><TD>T F ?</TD></TR>\n"
      "<TR><TD>2</TD><TD></TD><TD>7</TD><TD>0 1</TD><TD/></TR>\n"
      "</TABLEDATA></DATA></TABLE></RESOURCE></VOTABLE>\n";
  const SourceTable plain = parse_votable_table(content, "t.vot");
  EXPECT_TRUE(plain.arrays.empty());
  EXPECT_EQ(plain.unusable_columns.count("t"), 1u);
  const SourceTable t = parse_votable_table(content, "t.vot", {"t", "n", "rej", "ok", "absent"});
  ASSERT_EQ(t.arrays.size(), 4u);
  EXPECT_EQ(t.unusable_columns.count("t"), 0u);
  const auto& time = t.arrays.at("t");
  EXPECT_EQ(time.unit, "d");
  ASSERT_EQ(time.rows.size(), 2u);
  ASSERT_EQ(time.rows[0].size(), 3u);
  EXPECT_EQ(time.rows[0][1], 2.25);
  EXPECT_TRUE(std::isnan(time.rows[0][2]));
  EXPECT_TRUE(time.rows[1].empty());
  EXPECT_TRUE(std::isnan(t.arrays.at("n").rows[0][1]));
  EXPECT_EQ(t.arrays.at("n").rows[1], (std::vector<double>{7}));
  EXPECT_TRUE(t.arrays.at("rej").logical);
  EXPECT_EQ(t.arrays.at("rej").rows[0], (std::vector<double>{1, 0, 0, 1}));
  EXPECT_EQ(t.arrays.at("rej").rows[1], (std::vector<double>{0, 1}));
  EXPECT_EQ(t.arrays.at("ok").rows[0][1], 0.0);
  EXPECT_TRUE(std::isnan(t.arrays.at("ok").rows[0][2]));
  EXPECT_EQ(t.table.column("source_id").integer[1], 2);
  // An element that is not of the FIELD's type names the line and the column.
  try {
    parse_votable_table(test::replaced(content, {{"3 -9 4", "3 x 4"}}), "t.vot", {"n"});
    ADD_FAILURE() << "accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "votable_value");
    EXPECT_NE(std::string(e.what()).find("t.vot:line 9: column 'n'"), std::string::npos)
        << e.what();
  }
}

TEST(VOTable, BadFilesNameTheirRuleAndLine) {
  const std::string head =
      "<?xml version=\"1.0\"?>\n<VOTABLE><RESOURCE><TABLE>\n"
      "<FIELD name=\"id\" datatype=\"char\" arraysize=\"*\"/>\n"
      "<FIELD name=\"plx\" datatype=\"double\" unit=\"mas\"/>\n<DATA><TABLEDATA>\n";
  const std::string tail = "</TABLEDATA></DATA></TABLE></RESOURCE></VOTABLE>\n";
  EXPECT_EQ(rule_of(head + "<TR><TD>A</TD><TD>0.5</TD></TR>\n" + tail), "accepted");
  // Malformed XML: a TD closed by a TR.
  EXPECT_EQ(rule_of(head + "<TR><TD>A</TD><TD>0.5</TR>\n" + tail),
            "votable_xml | t.vot:line 6: [votable_xml] the XML does not parse: mismatched tag");
  EXPECT_EQ(
      rule_of(head + "<TR><TD>A</TD></TR>\n" + tail),
      "field_count | t.vot:line 6: [field_count] a TR with 1 TD where the TABLE has 2 FIELDs");
  // The FIELD says double; the data say otherwise.
  EXPECT_EQ(
      rule_of(head + "<TR><TD>A</TD><TD>0.5</TD></TR>\n<TR><TD>B</TD><TD>high</TD></TR>\n" + tail),
      "votable_value | t.vot:line 7: column 'plx': [votable_value] 'high' is not a double value, "
      "which the FIELD says the column holds");
  EXPECT_EQ(rule_of("<?xml version=\"1.0\"?>\n<VOTABLE><RESOURCE/></VOTABLE>\n").substr(0, 13),
            "votable_table");
  EXPECT_EQ(rule_of("").substr(0, 11), "votable_xml");
  EXPECT_EQ(rule_of("<VOTABLE><RESOURCE><TABLE><DATA><TABLEDATA></TABLEDATA></DATA></TABLE></"
                    "RESOURCE></VOTABLE>")
                .substr(0, 13),
            "votable_table");
}

}  // namespace
}  // namespace rungcal
