// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/table: star table, delimited text and FITS readers/writers, units.
// FITS interchange is checked against astropy (Debian python3-astropy) in both directions.
#include <gtest/gtest.h>
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include <csignal>
#include <cstdio>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <set>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/text_io.hpp"
#include "rungcal/table/units.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

std::string rule_of(const std::function<void()>& f) {
  try {
    f();
  } catch (const InputError& e) {
    return e.rule();
  }
  return "";
}

TEST(StarTable, SelectRowsKeepsTypesAndNulls) {
  StarTable t;
  t.add_column("x", ColumnType::kReal, "mag");
  t.add_column("n", ColumnType::kInteger);
  t.column("x").push_real(1.5);
  t.column("x").push_null();
  t.column("n").push_integer(7);
  t.column("n").push_integer(8);
  StarTable s = t.select_rows({1, 0});
  EXPECT_TRUE(s.column("x").is_null(0));
  EXPECT_DOUBLE_EQ(s.column("x").real[1], 1.5);
  EXPECT_EQ(s.column("n").integer[0], 8);
  EXPECT_EQ(s.column("x").unit, "mag");
}

TEST(TextReader, CrlfBomCommentsAndMissingMarkers) {
  TextReadOptions o;
  o.missing = {"xxx", "---", "...", "\xE2\x80\xA6"};  // the last is the Unicode ellipsis
  auto t = parse_text_table(
      "\xEF\xBB\xBFid,mag\r\n# a comment\r\nA,1.5\r\nB,xxx\r\nC,\xE2\x80\xA6\r\nD,---\r\nE,...",
      "x.csv", o);
  ASSERT_EQ(t.table.rows(), 5u);
  EXPECT_EQ(t.table.column("id").text[0], "A");  // BOM gone from the first name
  EXPECT_EQ(t.table.column("mag").text[0], "1.5");
  for (std::size_t r = 1; r < 5; ++r) EXPECT_TRUE(t.table.column("mag").is_null(r)) << r;
  EXPECT_EQ(t.source_rows[0], 3);  // line numbers count the header and comment lines
  EXPECT_EQ(t.source_rows[4], 7);
}

TEST(TextReader, MultispaceKeepsNamesWithSingleSpaces) {
  TextReadOptions o;
  o.delimiter = Delimiter::kMultiSpace;
  o.header_prefix = "#";
  auto t = parse_text_table("#Name  P  mag\nAA GEM  10.3  7.1\nX  CYG  1\n", "x.txt", o);
  EXPECT_EQ(t.table.column("Name").text[0], "AA GEM");
  EXPECT_EQ(t.table.column("Name").text[1], "X");
  EXPECT_EQ(t.table.column("P").text[1], "CYG");
}

TEST(TextReader, QuotedCsvFields) {
  TextReadOptions o;
  auto t = parse_text_table("id,note\n\"A, b\",\"say \"\"hi\"\"\"\n", "x.csv", o);
  EXPECT_EQ(t.table.column("id").text[0], "A, b");
  EXPECT_EQ(t.table.column("note").text[0], "say \"hi\"");
}

TEST(TextReader, HeaderlessFileTakesNamesFromOptions) {
  TextReadOptions o;
  o.has_header = false;
  o.column_names = {"a", "b"};
  auto t = parse_text_table("1,2\n3,4", "x.csv", o);  // no final newline
  ASSERT_EQ(t.table.rows(), 2u);
  EXPECT_EQ(t.table.column("b").text[1], "4");
  o.column_names.clear();
  EXPECT_EQ(rule_of([&] { parse_text_table("1,2\n", "x.csv", o); }), "config_value");
}

TEST(TextReader, BadFilesNameTheirRule) {
  TextReadOptions o;
  EXPECT_EQ(rule_of([&] { parse_text_table("", "x.csv", o); }), "empty_file");
  EXPECT_EQ(rule_of([&] { parse_text_table("id,a\n", "x.csv", o); }), "empty_file");
  EXPECT_EQ(rule_of([&] { parse_text_table("id,a\n1,2,3\n", "x.csv", o); }), "field_count");
  EXPECT_EQ(rule_of([&] { parse_text_table("id,id\n1,2\n", "x.csv", o); }), "duplicate_column");
  EXPECT_EQ(rule_of([&] { parse_text_table("id,a\n\"1,2\n", "x.csv", o); }), "unterminated_quote");
  EXPECT_EQ(rule_of([&] { parse_text_table(std::string("\xFF\xFEi\0d\0", 6), "x.csv", o); }),
            "encoding");
  EXPECT_EQ(rule_of([&] { parse_text_table(std::string("id\n\0\n", 5), "x.csv", o); }), "encoding");
  try {
    parse_text_table("id,a\n1,2\n3\n", "cat.csv", o);
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()),
              "cat.csv:line 3: [field_count] 1 fields where the header has 2 columns");
  }
}

// Every group of a TextTableReader, joined, against parse_text_table of the whole.
void expect_groups_equal_whole(const std::string& content, const TextReadOptions& o) {
  test::TempDir dir;
  test::write_text(dir.file("t.txt"), content);
  const SourceTable whole = parse_text_table(content, dir.file("t.txt"), o);
  for (std::size_t group : {1u, 2u, 3u, 1000u}) {
    TextTableReader reader(dir.file("t.txt"), o);
    StarTable joined;
    std::vector<std::int64_t> lines;
    bool first = true;
    for (SourceTable g = reader.read(group); g.table.rows() > 0; g = reader.read(group)) {
      EXPECT_LE(g.table.rows(), group);
      first ? void(joined = g.table) : joined.append_rows(g.table);
      first = false;
      lines.insert(lines.end(), g.source_rows.begin(), g.source_rows.end());
    }
    EXPECT_EQ(format_csv_table(joined), format_csv_table(whole.table)) << group;
    EXPECT_EQ(lines, whole.source_rows) << group;
    EXPECT_EQ(reader.bytes_read(), reader.file_bytes()) << group;
  }
}

TEST(TextReader, GroupsReadInTurnGiveTheWholeTable) {
  TextReadOptions o;
  o.missing = {"xxx", "---"};
  expect_groups_equal_whole(
      "\xEF\xBB\xBFid,mag\r\n# a comment\r\nA,1.5\r\nB,xxx\r\n\r\n\"C, c\",\" 2 \"\r\nD,---\r\nE,3",
      o);
  TextReadOptions spaced;
  spaced.delimiter = Delimiter::kMultiSpace;
  spaced.header_prefix = "#";
  spaced.skip_lines = 1;
  expect_groups_equal_whole("title line\n#Name  P\nAA GEM  10.3\nX  1\n\nY  2\n", spaced);
  TextReadOptions headerless;
  headerless.has_header = false;
  headerless.column_names = {"a", "b"};
  expect_groups_equal_whole("1,2\n3,4\n5,6", headerless);
  // Longer than the reader's 1 MiB blocks: lines cut across a block boundary.
  std::string big = "id,value\n";
  for (int i = 0; i < 60000; ++i) big += fmt::format("star-{:06d},{}.{}\n", i, i, i % 7);
  expect_groups_equal_whole(big, o);
}

TEST(TextReader, AGroupReaderNamesTheRulesTheWholeReaderNames) {
  test::TempDir dir;
  TextReadOptions o;
  auto rule_of_groups = [&](const std::string& content) {
    test::write_text(dir.file("t.csv"), content);
    return rule_of([&] {
      TextTableReader reader(dir.file("t.csv"), o);
      while (reader.read(1).table.rows() > 0) {
      }
    });
  };
  EXPECT_EQ(rule_of_groups(""), "empty_file");
  EXPECT_EQ(rule_of_groups("# only a comment\n"), "empty_file");
  EXPECT_EQ(rule_of_groups("id,a\n1,2\n1,2,3\n"), "field_count");
  EXPECT_EQ(rule_of_groups("id,id\n1,2\n"), "duplicate_column");
  EXPECT_EQ(rule_of_groups(std::string("\xFF\xFEi\0d\0", 6)), "encoding");
  EXPECT_EQ(rule_of_groups(std::string("id\n1\n\0\n", 7)), "encoding");
  EXPECT_EQ(rule_of([&] { TextTableReader(dir.file("absent.csv"), o); }), "unreadable_file");
  test::write_text(dir.file("t.csv"), "id,a\n1,2\n3\n");
  TextTableReader reader(dir.file("t.csv"), o);
  EXPECT_EQ(reader.read(1).table.rows(), 1u);  // the good line comes first
  try {
    reader.read(1);
    ADD_FAILURE() << "line 3 has one field";
  } catch (const InputError& e) {
    EXPECT_EQ(std::string(e.what()).substr(std::string(e.what()).find(":line")),
              ":line 3: [field_count] 1 fields where the header has 2 columns");
  }
}

TEST(Units, ConversionsToCanonicalUnits) {
  EXPECT_DOUBLE_EQ(unit_conversion(QuantityKind::kParallax, "arcsec")->apply(0.001), 1.0);
  EXPECT_DOUBLE_EQ(unit_conversion(QuantityKind::kParallax, "uas")->apply(1500.0), 1.5);
  EXPECT_DOUBLE_EQ(unit_conversion(QuantityKind::kPeriod, "log_d")->apply(1.0), 10.0);
  EXPECT_DOUBLE_EQ(unit_conversion(QuantityKind::kPeriod, "h")->apply(12.0), 0.5);
  EXPECT_NEAR(unit_conversion(QuantityKind::kAngle, "rad")->apply(M_PI), 180.0, 1e-12);
  EXPECT_FALSE(unit_conversion(QuantityKind::kParallax, "pc").has_value());
}

StarTable sample_table() {
  StarTable t;
  t.add_column("id", ColumnType::kText);
  t.add_column("parallax_mas", ColumnType::kReal, "mas", "trigonometric parallax");
  t.add_column("nobs", ColumnType::kInteger);
  t.add_column("flag", ColumnType::kBoolean);
  const char* ids[] = {"A 1", "B", "C"};
  double plx[] = {1.25, -0.3, std::nan("")};
  for (int i = 0; i < 3; ++i) {
    t.column("id").push_text(ids[i]);
    t.column("parallax_mas").push_real(plx[i]);
    if (i == 1)
      t.column("nobs").push_null();
    else
      t.column("nobs").push_integer(10 + i);
    if (i == 2)
      t.column("flag").push_null();
    else
      t.column("flag").push_boolean(i == 0);
  }
  t.set_keyword("RGSTAGE", std::string("test"), "stage");
  t.set_keyword("RGINP01", std::string(100, 'p'), "a long path");
  t.set_keyword("RGNINPUT", std::int64_t{1});
  return t;
}

TEST(Fits, RoundTripKeepsValuesUnitsNullsAndKeywords) {
  test::TempDir dir;
  StarTable t = sample_table();
  write_fits_tables(dir.file("t.fits"), {{"CATALOG", &t}});
  SourceTable back = read_fits_table(dir.file("t.fits"), {"CATALOG", 0});
  ASSERT_EQ(back.table.rows(), 3u);
  EXPECT_EQ(back.table.column("id").text[0], "A 1");
  EXPECT_DOUBLE_EQ(back.table.column("parallax_mas").real[1], -0.3);
  EXPECT_TRUE(back.table.column("parallax_mas").is_null(2));
  EXPECT_EQ(back.table.column("parallax_mas").unit, "mas");
  EXPECT_TRUE(back.table.column("nobs").is_null(1));
  EXPECT_EQ(back.table.column("nobs").integer[2], 12);
  EXPECT_TRUE(back.table.column("flag").is_null(2));
  EXPECT_EQ(back.table.column("flag").boolean[0], 1);
  ASSERT_NE(back.table.keyword("RGINP01"), nullptr);
  EXPECT_EQ(std::get<std::string>(back.table.keyword("RGINP01")->value), std::string(100, 'p'));
}

TEST(Fits, AstropyReadsWhatRungcalWrites) {
  // Reference: astropy.table.Table.read (Debian python3-astropy).
  test::TempDir dir;
  StarTable t = sample_table();
  write_fits_tables(dir.file("t.fits"), {{"CATALOG", &t}});
  auto r = test::run_python(R"(
import sys, math
from astropy.table import Table
from astropy.io import fits
t = Table.read(sys.argv[1], hdu="CATALOG")
h = fits.getheader(sys.argv[1], "CATALOG")
print(list(t["id"]), [None if v is None or (hasattr(t["parallax_mas"], "mask") and t["parallax_mas"].mask[i]) or math.isnan(v) else float(v) for i, v in enumerate(t["parallax_mas"])])
print(str(t["parallax_mas"].unit), list(t["nobs"].mask), h["RGSTAGE"], len(h["RGINP01"]))
)",
                            {dir.file("t.fits")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("['A 1', 'B', 'C'] [1.25, -0.3, None]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("mas [False, True, False] test 100"), std::string::npos) << r.output;
}

TEST(Fits, RungcalReadsWhatAstropyWrites) {
  // Reference: astropy.table.Table.write with units, a masked integer column (TNULL) and NaN.
  test::TempDir dir;
  auto r = test::run_python(R"(
import sys, numpy as np
from astropy.table import Table, MaskedColumn
import astropy.units as u
t = Table()
t["name"] = ["V1", "V2", "V3"]
t["plx"] = np.array([0.5, np.nan, -0.125]) * u.mas
t["plx_uas"] = np.array([500.0, 10.0, -125.0]) * u.uas
t["n"] = MaskedColumn([3, 4, 5], mask=[False, True, False], dtype=np.int32)
t["P"] = np.array([3.5, 10.0, 20.25], dtype=np.float32) * u.d
t.meta["OBSERVAT"] = "Mount Vellin"
t.write(sys.argv[1], format="fits")
)",
                            {dir.file("a.fits")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  SourceTable t = read_fits_table(dir.file("a.fits"));
  ASSERT_EQ(t.table.rows(), 3u);
  EXPECT_EQ(t.table.column("name").text[2], "V3");
  EXPECT_DOUBLE_EQ(t.table.column("plx").real[0], 0.5);
  EXPECT_TRUE(t.table.column("plx").is_null(1));
  EXPECT_DOUBLE_EQ(t.table.column("plx").real[2], -0.125);
  EXPECT_EQ(t.table.column("plx").unit, "mas");
  // astropy writes micro-arcsec as "10**-6 arcsec"; rungcal's unit table knows that spelling.
  EXPECT_DOUBLE_EQ(
      unit_conversion(QuantityKind::kParallax, t.table.column("plx_uas").unit)->apply(500.0), 0.5);
  EXPECT_EQ(t.table.column("n").type, ColumnType::kInteger);
  EXPECT_TRUE(t.table.column("n").is_null(1));
  EXPECT_EQ(t.table.column("n").integer[2], 5);
  EXPECT_DOUBLE_EQ(t.table.column("P").real[2], 20.25);
  EXPECT_EQ(std::get<std::string>(t.table.keyword("OBSERVAT")->value), "Mount Vellin");
}

TEST(Fits, ArrayColumnsAskedForAreReadPerRow) {
  // Reference: astropy.io.fits writes a fixed vector column (3D), variable-length arrays
  // (PD, PE, PL; FITS 4.0 section 7.3.5) and an integer VLA with TNULL; the values must come
  // back as astropy wrote them, a null element as NaN.
  test::TempDir dir;
  auto r = test::run_python(R"py(
import sys, numpy as np
from astropy.io import fits
def obj(*arrays):
    a = np.empty(len(arrays), dtype=object)
    for i, v in enumerate(arrays):
        a[i] = v
    return a
cols = [fits.Column(name="id", format="K", array=np.array([1, 2])),
        fits.Column(name="v3", format="3D", array=np.array([[1.0, 2.0, 3.0], [4.0, np.nan, 6.0]])),
        fits.Column(name="t", format="PD()", unit="d", array=obj(np.array([1.5, 2.25, np.nan]), np.array([7.0]))),
        fits.Column(name="s", format="PE()", array=obj(np.array([0.5], dtype=np.float32), np.array([], dtype=np.float32))),
        fits.Column(name="rej", format="PL()", array=obj(np.array([True, False]), np.array([False, True, True]))),
        fits.Column(name="n", format="PJ()", null=-9, array=obj(np.array([3, -9], dtype=np.int32), np.array([5], dtype=np.int32)))]
fits.BinTableHDU.from_columns(cols).writeto(sys.argv[1])
)py",
                            {dir.file("a.fits")});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  const SourceTable plain = read_fits_table(dir.file("a.fits"));
  EXPECT_TRUE(plain.arrays.empty());
  EXPECT_EQ(plain.unusable_columns.count("v3") + plain.unusable_columns.count("t"), 2u);
  const SourceTable t = read_fits_table(dir.file("a.fits"), {}, {"v3", "t", "s", "rej", "n"});
  ASSERT_EQ(t.arrays.size(), 5u);
  EXPECT_EQ(t.unusable_columns.count("t"), 0u);
  EXPECT_EQ(t.arrays.at("v3").rows[0], (std::vector<double>{1, 2, 3}));
  EXPECT_TRUE(std::isnan(t.arrays.at("v3").rows[1][1]));
  EXPECT_EQ(t.arrays.at("t").unit, "d");
  ASSERT_EQ(t.arrays.at("t").rows[0].size(), 3u);
  EXPECT_EQ(t.arrays.at("t").rows[0][1], 2.25);
  EXPECT_TRUE(std::isnan(t.arrays.at("t").rows[0][2]));
  EXPECT_EQ(t.arrays.at("t").rows[1], (std::vector<double>{7}));
  EXPECT_EQ(t.arrays.at("s").rows[0], (std::vector<double>{0.5}));
  EXPECT_TRUE(t.arrays.at("s").rows[1].empty());
  EXPECT_TRUE(t.arrays.at("rej").logical);
  // astropy 5.2 writes a PL array's elements as bytes 1 and 0, not 'T' and 'F': cfitsio reads
  // 1 as true and 0 as the null of FITS 4.0, section 7.3.3.1 (NaN here). A null rejection
  // flag rejects nothing, so such files still give the right epochs.
  ASSERT_EQ(t.arrays.at("rej").rows[1].size(), 3u);
  EXPECT_EQ(t.arrays.at("rej").rows[0][0], 1.0);
  EXPECT_TRUE(std::isnan(t.arrays.at("rej").rows[0][1]));
  EXPECT_EQ(t.arrays.at("rej").rows[1][2], 1.0);
  EXPECT_EQ(t.arrays.at("n").rows[0][0], 3.0);
  EXPECT_TRUE(std::isnan(t.arrays.at("n").rows[0][1]));
  // Read in groups of rows, the arrays follow the rows.
  FitsTableReader reader(dir.file("a.fits"));
  reader.read_arrays({"t"});
  const SourceTable second = reader.read(1, 1);
  ASSERT_EQ(second.arrays.at("t").rows.size(), 1u);
  EXPECT_EQ(second.arrays.at("t").rows[0], (std::vector<double>{7}));
}

TEST(Fits, BadFilesNameTheirRule) {
  test::TempDir dir;
  StarTable t = sample_table();
  write_fits_tables(dir.file("t.fits"), {{"CATALOG", &t}});
  std::string bytes = test::read_text(dir.file("t.fits"));
  test::write_text(dir.file("trunc.fits"),
                   bytes.substr(0, bytes.size() - 2000));  // inside the data
  EXPECT_EQ(rule_of([&] { read_fits_table(dir.file("trunc.fits")); }), "fits_read");
  test::write_text(dir.file("trunc_header.fits"),
                   bytes.substr(0, 4000));  // inside the table header
  try {
    read_fits_table(dir.file("trunc_header.fits"));
    ADD_FAILURE() << "expected an error";
  } catch (const InputError& e) {
    EXPECT_NE(std::string(e.what()).find("truncated"), std::string::npos) << e.what();
  }
  test::write_text(dir.file("text.fits"), "id,a\n1,2\n");
  EXPECT_EQ(rule_of([&] { read_fits_table(dir.file("text.fits")); }), "fits_read");
  EXPECT_EQ(rule_of([&] { read_fits_table(dir.file("t.fits"), {"NOPE", 0}); }), "fits_hdu");
  EXPECT_EQ(rule_of([&] { read_fits_table(dir.file("t.fits"), {"", 5}); }), "fits_hdu");
  EXPECT_EQ(rule_of([&] { read_fits_table(dir.file("none.fits")); }), "unreadable_file");
}

std::string fits_read_rule(const std::string& path) {
  try {
    read_fits_table(path);
  } catch (const InputError& e) {
    return e.rule();
  }
  return "";
}

TEST(Fits, HeadersDeclaringMoreThanTheFileHoldsAreRefusedBeforeAnyAllocation) {
  // TFIELDS is 0..999 by the FITS standard (4.0, section 7.2.1); NAXIS2 rows of NAXIS1
  // bytes must be in the file. Both edited into a real product, card by card.
  test::TempDir dir;
  const std::string good = test::read_text(test::source_file("sample_data/calibrators.fits"));
  auto with_card = [&](const std::string& key, const std::string& value) {
    std::string bytes = good;
    const std::size_t at = bytes.find(key, 2880);  // in the table's header, not the primary
    EXPECT_NE(at, std::string::npos) << key;
    const std::string card = fmt::format("{:<8}= {:>20}", key, value);
    bytes.replace(at, card.size(), card);
    return bytes;
  };
  test::write_text(dir.file("tfields.fits"), with_card("TFIELDS", "999999999"));
  test::write_text(dir.file("naxis2.fits"), with_card("NAXIS2", "900000000000"));
  EXPECT_EQ(fits_read_rule(dir.file("tfields.fits")), "fits_read");
  EXPECT_EQ(fits_read_rule(dir.file("naxis2.fits")), "fits_read");
  EXPECT_EQ(fits_read_rule(test::source_file("sample_data/calibrators.fits")), "");
}

TEST(Fits, InputsTheFuzzerFoundAreReadOrRefusedCleanly) {
  // fuzz/regressions/fits: files that once crashed the reader (under AddressSanitizer, or
  // with an exception other than InputError). Now each is refused with rule fits_read or,
  // where nothing in it is wrong enough to refuse, read.
  int refused = 0;
  for (const auto& e :
       std::filesystem::directory_iterator(test::source_file("fuzz/regressions/fits"))) {
    std::string rule;
    EXPECT_NO_THROW(rule = fits_read_rule(e.path().string())) << e.path();
    EXPECT_TRUE(rule.empty() || rule == "fits_read") << e.path() << ": " << rule;
    refused += !rule.empty();
  }
  EXPECT_GE(refused, 5);
}

// fuzz/seeds/fits/epoch_arrays.fits, the fuzzer's array-column seed (written by astropy,
// fuzz/seeds/fits/write_epoch_arrays.py): its variable-length (PD, PL) and fixed vector
// (12D, 12E) columns read back, the fluxes being the magnitudes through the Gaia G zero point
// 25.6874 the writer used, so the fuzzer starts from a file the reader takes whole.
TEST(Fits, TheArrayColumnSeedReadsWhole) {
  const SourceTable t = read_fits_table(test::source_file("fuzz/seeds/fits/epoch_arrays.fits"), {},
                                        {"g_transit_time", "g_transit_mag", "g_transit_flux",
                                         "g_transit_flux_over_error", "variability_flag_g_reject"});
  ASSERT_EQ(t.table.rows(), 2u);
  ASSERT_EQ(t.arrays.size(), 5u);
  const auto& mag = t.arrays.at("g_transit_mag").rows;
  const auto& flux = t.arrays.at("g_transit_flux").rows;
  for (std::size_t r = 0; r < 2; ++r) {
    ASSERT_EQ(mag[r].size(), 12u);
    ASSERT_EQ(flux[r].size(), 12u);
    ASSERT_EQ(t.arrays.at("g_transit_time").rows[r].size(), 12u);
    for (std::size_t k = 0; k < 12; ++k)
      EXPECT_NEAR(flux[r][k], std::pow(10.0, -0.4 * (mag[r][k] - 25.6874)), 1e-9 * flux[r][k]);
    EXPECT_DOUBLE_EQ(t.arrays.at("g_transit_flux_over_error").rows[r][0], 500.0);
  }
  EXPECT_TRUE(t.arrays.at("variability_flag_g_reject").logical);
  const auto& flags = t.arrays.at("variability_flag_g_reject").rows[1];
  EXPECT_DOUBLE_EQ(flags[0], 1.0);  // every fifth epoch of the second source
  // astropy writes a variable-length logical's false as byte 0, which the FITS standard
  // (4.0, section 7.3.3: 'T', 'F', or 0 for undefined) reads as null; the gaia_epoch layout
  // drops only a set flag, so a null one keeps its epoch.
  EXPECT_TRUE(std::isnan(flags[1]));
}

}  // namespace
}  // namespace rungcal

namespace rungcal {
namespace {

StarTable stream_group(const std::vector<std::string>& ids, double first) {
  StarTable t;
  t.add_column("id", ColumnType::kText, "", "star id");
  t.add_column("x", ColumnType::kReal, "mag");
  t.add_column("n", ColumnType::kInteger);
  t.add_column("ok", ColumnType::kBoolean);
  for (std::size_t i = 0; i < ids.size(); ++i) {
    ids[i].empty() ? t.column("id").push_null() : t.column("id").push_text(ids[i]);
    i == 1 ? t.column("x").push_null() : t.column("x").push_real(first + static_cast<double>(i));
    i == 2 ? t.column("n").push_null() : t.column("n").push_integer(static_cast<std::int64_t>(i));
    t.column("ok").push_boolean(i % 2 == 0);
  }
  return t;
}

TEST(FitsStream, GroupsWrittenInTurnReadBackAsOneTable) {
  // A later group holds a longer text value (the column widens), the table was made for
  // more rows than arrive (the rest are dropped), then for fewer (rows are added).
  for (std::int64_t expected : {10, 2}) {
    test::TempDir dir;
    StarTable a = stream_group({"A1", "", "A3"}, 1.0);
    StarTable b = stream_group({"B-much-longer-id", "B2", "B3", "B4"}, 10.0);
    FitsTableStream stream(dir.file("s.fits"), "STREAM", expected);
    stream.append(a);
    EXPECT_FALSE(test::file_exists(dir.file("s.fits")));  // nothing at the path until finish
    stream.append(b);
    StarTable extra = stream_group({"R"}, 0.0);
    StarTable schema = stream_group({}, 0.0);
    stream.finish({{"RGTEST", std::string("yes"), "a keyword"}}, {{"EXTRA", &extra}}, schema);
    EXPECT_EQ(stream.rows(), 7);
    StarTable whole = a;
    whole.append_rows(b);
    StarTable back = read_fits_table(dir.file("s.fits"), {"STREAM", 0}).table;
    ASSERT_NE(back.keyword("RGTEST"), nullptr);
    back.header().clear();
    EXPECT_EQ(format_csv_table(back), format_csv_table(whole)) << expected;
    EXPECT_EQ(back.column("x").unit, "mag");
    EXPECT_EQ(read_fits_table(dir.file("s.fits"), {"EXTRA", 0}).table.rows(), 1u);
  }
}

// A table of `columns` real columns (8 bytes a row each) and rows [first, first + n), the
// value of row r in column c being r + c / 1000.
StarTable real_rows(std::size_t columns, std::size_t first, std::size_t n) {
  StarTable t;
  // Every column first: a column added later is made as long as the table already is.
  for (std::size_t c = 0; c < columns; ++c) t.add_column(fmt::format("x{}", c), ColumnType::kReal);
  for (std::size_t c = 0; c < columns; ++c)
    for (std::size_t r = first; r < first + n; ++r)
      t.column(c).push_real(static_cast<double>(r) + static_cast<double>(c) / 1000.0);
  return t;
}

// Streams `kept` rows in groups of `group` into a table made for kept + dropped rows, then
// reads the file back: the rows and values written, and nothing else.
void stream_and_check(const test::TempDir& dir, std::size_t columns, std::size_t kept,
                      std::size_t dropped, std::size_t group) {
  const std::string path = dir.file("s.fits");
  FitsTableStream stream(path, "STREAM", static_cast<std::int64_t>(kept + dropped));
  for (std::size_t first = 0; first < kept; first += group)
    stream.append(real_rows(columns, first, std::min(group, kept - first)));
  StarTable rejects = real_rows(1, 0, dropped);
  stream.finish({}, {{"REJECTS", &rejects}}, real_rows(columns, 0, 0));
  const StarTable back = read_fits_table(path, {"STREAM", 0}).table;
  ASSERT_EQ(back.rows(), kept) << kept << " kept, " << dropped << " dropped";
  ASSERT_EQ(back.columns(), columns);
  for (std::size_t r = 0; r < kept; ++r)
    for (std::size_t c = 0; c < columns; ++c)
      ASSERT_EQ(back.column(c).real[r], static_cast<double>(r) + static_cast<double>(c) / 1000.0)
          << kept << " kept, " << dropped << " dropped, row " << r;
  EXPECT_EQ(read_fits_table(path, {"REJECTS", 0}).table.rows(), dropped);
  EXPECT_EQ(std::filesystem::file_size(path) % 2880, 0u);  // FITS 4.0, section 3.1
}

TEST(FitsStream, EveryKeptRowCountReadsBackWithOrWithoutDroppedRows) {
  // The rows made but not written (rows an ingest refused) are dropped at finish(); when
  // the kept rows ended exactly on a 2880-byte FITS block, cfitsio failed with "tried to
  // move past end of file" (issue 15). Rows of two 8-byte columns: every count from 1 to
  // 2,000 with a row dropped, 11 of them filling whole blocks (180 rows a block), and every
  // count to 400 with none dropped.
  test::TempDir dir;
  for (std::size_t kept = 1; kept <= 2000; ++kept) stream_and_check(dir, 2, kept, 1, 1000);
  for (std::size_t kept = 1; kept <= 400; ++kept) stream_and_check(dir, 2, kept, 0, 1000);
  // More dropped rows than a block holds, across groups, and rows 1,440 bytes wide (180
  // columns: every even count fills whole blocks).
  for (std::size_t kept : {360u, 720u, 2880u})
    for (std::size_t dropped : {359u, 360u, 361u, 5000u})
      stream_and_check(dir, 1, kept, dropped, 7);
  for (std::size_t kept = 1; kept <= 24; ++kept)
    for (std::size_t dropped : {0u, 1u, 2u, 3u}) stream_and_check(dir, 180, kept, dropped, 5);
  // Every row refused: an empty table.
  stream_and_check(dir, 1, 0, 360, 1);
}

TEST(FitsPaths, NamesAreTakenLiterallyNotAsCfitsioSyntax) {
  // Issue 15: cfitsio reads "cal[1].fits" as HDU 1 of "cal", "run(2)/x" as a template and
  // more; a folder run[1] failed and left a stray empty file, and cal[1].fits could not be
  // read. Every such name is written, streamed and read as the file it names.
  test::TempDir dir;
  const StarTable t = stream_group({"A", "B"}, 1.0);
  for (const std::string folder : {"run[1]", "run(2)", "a+b", "x[STARS]", "c{d}"}) {
    for (const std::string name :
         {"cal[1].fits", "cal(2).fits", "plain.fits", "k[col x].fits", "~t.fits"}) {
      const std::string path = dir.file(folder) + "/" + name;
      write_fits_tables(path, {{"STARS", &t}});
      StarTable back = read_fits_table(path, {"STARS", 0}).table;
      back.header().clear();
      EXPECT_EQ(format_csv_table(back), format_csv_table(t)) << path;
      FitsTableStream stream(path + ".s", "STREAM", 3);
      stream.append(t);
      stream.finish({}, {}, t);
      EXPECT_EQ(read_fits_table(path + ".s", {"STREAM", 0}).table.rows(), 2u) << path;
    }
    std::set<std::string> files;
    for (const auto& e : std::filesystem::directory_iterator(dir.file(folder)))
      files.insert(e.path().filename().string());
    EXPECT_EQ(files,
              (std::set<std::string>{"cal[1].fits", "cal[1].fits.s", "cal(2).fits", "cal(2).fits.s",
                                     "plain.fits", "plain.fits.s", "k[col x].fits",
                                     "k[col x].fits.s", "~t.fits", "~t.fits.s"}))
        << folder;
  }
  // Nothing was made beside the folders (cfitsio's syntax once made "run" from "run[1]").
  std::set<std::string> top;
  for (const auto& e : std::filesystem::directory_iterator(dir.path()))
    top.insert(e.path().filename().string());
  EXPECT_EQ(top, (std::set<std::string>{"run[1]", "run(2)", "a+b", "x[STARS]", "c{d}"}));
}

TEST(FitsPaths, AWriteTheSystemRefusesNamesItsReasonAndLeavesNothing) {
  // A file-size limit (RLIMIT_FSIZE, in a child process) makes cfitsio's writes fail as a
  // full disk would, with errno EFBIG instead of ENOSPC: the message carries the system's
  // reason (issue 15: a full disk must say so), and no file or temporary file is left.
  test::TempDir dir;
  StarTable big;
  big.add_column("x", ColumnType::kReal);
  for (int i = 0; i < 100000; ++i) big.column("x").push_real(i);
  const std::string report = dir.file("message.txt");
  const pid_t child = ::fork();
  ASSERT_GE(child, 0);
  if (child == 0) {
    ::signal(SIGXFSZ, SIG_IGN);
    const struct rlimit limit = {64 * 1024, 64 * 1024};
    ::setrlimit(RLIMIT_FSIZE, &limit);
    std::string message = "written";
    try {
      write_fits_tables(dir.file("out/big.fits"), {{"BIG", &big}});
    } catch (const InputError& e) {
      message = e.rule() + ": " + e.what();
    }
    std::FILE* f = std::fopen(report.c_str(), "w");
    if (f) std::fputs(message.c_str(), f), std::fclose(f);
    ::_exit(0);
  }
  int status = 0;
  ::waitpid(child, &status, 0);
  const std::string message = test::read_text(report);
  EXPECT_EQ(message.rfind("write_failed: ", 0), 0u) << message;
  EXPECT_NE(message.find("File too large"), std::string::npos) << message;  // strerror(EFBIG)
  EXPECT_TRUE(std::filesystem::is_empty(dir.file("out")));
}

TEST(FitsStream, AStreamNeverFinishedLeavesNothing) {
  test::TempDir dir;
  {
    FitsTableStream stream(dir.file("s.fits"), "STREAM", 3);
    stream.append(stream_group({"A"}, 1.0));
  }
  EXPECT_FALSE(test::file_exists(dir.file("s.fits")));
  for (const auto& e : std::filesystem::directory_iterator(dir.path()))
    ADD_FAILURE() << "left behind: " << e.path();
}

}  // namespace
}  // namespace rungcal

namespace rungcal {
namespace {

// Reads every row of a FITS table in groups, from raw row blocks or through cfitsio's
// column reads, as CSV text plus the columns refused.
std::string read_both_ways(const std::string& path, bool block_reads, std::int64_t group) {
  FitsTableReader reader(path);
  reader.use_block_reads(block_reads);
  std::string out;
  for (std::int64_t first = 0; first < reader.rows(); first += group) {
    SourceTable t = reader.read(first, group);
    t.table.header().clear();
    out += format_csv_table(t.table);
    for (std::size_t c = 0; c < t.table.columns(); ++c)
      for (std::size_t r = 0; r < t.table.rows(); ++r)
        out += t.table.column(c).is_null(r) ? 'n' : '.';
    for (const auto& [name, why] : t.unusable_columns) out += name + ": " + why + "\n";
  }
  return out;
}

TEST(FitsBlockReads, GiveWhatCfitsioColumnReadsGive) {
  // Every column type astropy writes (Debian python3-astropy), with nulls: NaN floats,
  // TNULL integers, empty and blank-padded strings, scaled and unsigned integers (TZERO,
  // left to cfitsio), a vector column (refused either way).
  test::TempDir dir;
  auto py = test::run_python(R"(
import sys, numpy as np
from astropy.io import fits
n = 7
cols = [
  fits.Column(name='d', format='D', array=np.array([1.5, np.nan, -2e300, 0, 3, 4, 5])),
  fits.Column(name='e', format='E', unit='mag', array=np.array([1.25, 2, np.nan, 4, 5, 6, 7], 'f4')),
  fits.Column(name='k', format='K', null=-99, array=np.array([1, -99, 2**40, -5, 0, 7, 8])),
  fits.Column(name='j', format='J', null=-1, array=np.array([1, 2, -1, -2**31, 2**31 - 1, 0, 3])),
  fits.Column(name='i', format='I', array=np.array([1, -2, 3, -32768, 32767, 0, 9], 'i2')),
  fits.Column(name='b', format='B', array=np.array([0, 1, 255, 7, 8, 9, 10], 'u1')),
  fits.Column(name='l', format='L', array=np.array([True, False, True, False, True, True, False])),
  fits.Column(name='s', format='8A', array=np.array(['HPO-1', '', 'a b  ', 'x' * 8, ' lead', 'q', 'r'])),
  fits.Column(name='u', format='J', bzero=2**31, array=np.array([0, 1, 2**32 - 1, 5, 6, 7, 8], 'u4')),
  fits.Column(name='scaled', format='E', bscale=0.5, bzero=10, array=np.array([10, 10.5, 11, 0, 1, 2, 3], 'f4')),
  fits.Column(name='vec', format='3D', array=np.zeros((n, 3))),
]
fits.BinTableHDU.from_columns(cols, name='STARS').writeto(sys.argv[1])
)",
                             {dir.file("types.fits")});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  for (const std::string& path :
       {dir.file("types.fits"), test::source_file("sample_data/calibrators.fits")}) {
    for (std::int64_t group : {3, 1000}) {
      const std::string via_cfitsio = read_both_ways(path, false, group);
      const std::string via_blocks = read_both_ways(path, true, group);
      const auto at = std::mismatch(via_blocks.begin(), via_blocks.end(), via_cfitsio.begin(),
                                    via_cfitsio.end());
      const auto pos = static_cast<std::size_t>(at.first - via_blocks.begin());
      EXPECT_EQ(via_blocks, via_cfitsio)
          << path << " group " << group << ": first difference near '"
          << via_blocks.substr(pos > 40 ? pos - 40 : 0, 80) << "' vs '"
          << via_cfitsio.substr(pos > 40 ? pos - 40 : 0, 80) << "'";
      EXPECT_FALSE(via_cfitsio.empty());
    }
  }
}

}  // namespace
}  // namespace rungcal
