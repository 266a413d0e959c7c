// SPDX-License-Identifier: MIT
// rungcal-study's command line: each option fills the field it names.
#include "rungcal/simulate/study_cli.hpp"

#include <vector>

#include <gtest/gtest.h>

namespace rungcal {
namespace {

// Parses args (without the program name) into a fresh command line.
StudyCommandLine parsed(std::vector<std::string> args) {
  CLI::App app;
  StudyCommandLine line;
  add_study_options(app, line);
  std::vector<const char*> argv{"rungcal-study"};
  for (const std::string& a : args) argv.push_back(a.c_str());
  app.parse(static_cast<int>(argv.size()), argv.data());
  return line;
}

TEST(StudyCli, OptionsFillTheirFields) {
  const StudyCommandLine line =
      parsed({"--relation", "optical", "--stars", "3000", "--mocks", "50", "--seed", "101",
              "--blend-min-mag", "0.5", "--hold-outlier-factor", "--outlier-parallax-factor", "6",
              "--contaminations", "blends,far_stars", "--out", "a.json"});
  EXPECT_EQ(line.choice.relation, "optical");
  EXPECT_EQ(line.study.scenario.stars, 3000);
  EXPECT_EQ(line.study.mocks, 50);
  EXPECT_EQ(line.choice.seed, 101U);
  EXPECT_DOUBLE_EQ(line.study.fit.hierarchical.blend_min_mag, 0.5);
  EXPECT_TRUE(line.choice.hold_outlier_factor);
  EXPECT_DOUBLE_EQ(line.study.fit.outlier_factor.value, 6.0);
  EXPECT_EQ(line.choice.contaminations, "blends,far_stars");
  EXPECT_EQ(line.out, "a.json");
  EXPECT_TRUE(line.combine.empty());
  EXPECT_TRUE(line.paired.empty());
}

TEST(StudyCli, DefaultBlendComponentIsTheFitsOwn) {
  const StudyCommandLine line = parsed({});
  EXPECT_EQ(line.choice.blend_component, kBlendComponentNames.name(HierarchicalSettings{}.blends));
  EXPECT_EQ(line.choice.relation, "wesenheit");
}

TEST(StudyCli, PairedTakesExactlyTwoFilesAndExcludesCombine) {
  EXPECT_EQ(parsed({"--paired", "a.json", "b.json"}).paired.size(), 2U);
  EXPECT_THROW(parsed({"--paired", "a.json"}), CLI::ParseError);
  EXPECT_THROW(parsed({"--paired", "a.json", "b.json", "--combine", "c.json"}), CLI::ParseError);
}

}  // namespace
}  // namespace rungcal
