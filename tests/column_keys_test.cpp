// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/ingest/column_keys: the message for a [columns] key that is not a
// catalog quantity, and the column map's reference in docs/file-formats.md.
#include <gtest/gtest.h>

#include <string>

#include "rungcal/core/error.hpp"
#include "rungcal/ingest/column_keys.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

TEST(ColumnKeys, AMisspeltKeyGetsTheClosestOne) {
  EXPECT_EQ(unknown_column_key_message("paralax"),
            "not a catalog quantity; did you mean 'parallax'? (the keys are listed in "
            "docs/file-formats.md, \"Column map\")");
  EXPECT_NE(unknown_column_key_message("pulsator_clas").find("did you mean 'pulsator_class'?"),
            std::string::npos);
}

TEST(ColumnKeys, ACatalogColumnNameNamesItsKey) {
  EXPECT_EQ(unknown_column_key_message("parallax_mas"),
            "not a [columns] key: parallax_mas is the catalog column, its key is 'parallax' (the "
            "keys are listed in docs/file-formats.md, \"Column map\")");
  EXPECT_NE(unknown_column_key_message("period_d").find("its key is 'period'"), std::string::npos);
  EXPECT_NE(unknown_column_key_message("mag_V").find("[bands.NAME]"), std::string::npos);
}

TEST(ColumnKeys, NothingCloseListsEveryKey) {
  const std::string m = unknown_column_key_message("brightness_temperature");
  EXPECT_NE(m.find("known: id, period, period_err,"), std::string::npos) << m;
  EXPECT_EQ(m.find("did you mean"), std::string::npos) << m;
}

TEST(ColumnKeys, TheDocsListEveryKeyAndItsCatalogColumn) {
  const std::string doc = test::read_text(test::source_file("docs/file-formats.md"));
  const auto start = doc.find("### Column map");
  ASSERT_NE(start, std::string::npos);
  const std::string section = doc.substr(start, doc.find("\n### ", start + 1) - start);
  for (const auto& q : catalog_quantities()) {
    EXPECT_NE(section.find("`" + std::string(q.key) + "`"), std::string::npos) << q.key;
    EXPECT_NE(section.find("`" + std::string(q.column) + "`"), std::string::npos) << q.column;
  }
}

TEST(ColumnKeys, IngestStopsOnAMisspeltKeyWithTheSuggestionAndExit2) {
  test::TempDir dir;
  test::write_text(dir.file("in.csv"), "id,P,V,V_err\nS1,5.0,12.0,0.02\n");
  test::write_text(dir.file("c.toml"),
                   "[source]\npath = \"in.csv\"\n[columns]\nid = \"id\"\nperiod = \"P\"\n"
                   "mode = { value = \"fundamental\" }\n"
                   "pulsator_class = { value = \"classical_cepheid\" }\nparallax_mas = \"plx\"\n"
                   "[bands.V]\nmag = \"V\"\nerr = \"V_err\"\n[output]\ncatalog = \"out/c.fits\"\n");
  try {
    ingest_options_from_file(dir.file("c.toml"));
    ADD_FAILURE() << "accepted";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "unknown_config_key");
  }
  auto r = test::run_stage("ingest", "--config " + dir.file("c.toml"));
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("c.toml"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("line 8"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("its key is 'parallax'"), std::string::npos) << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("out")));
}

}  // namespace
}  // namespace rungcal
