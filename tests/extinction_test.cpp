// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/extinction against Debian's python3-extinction (0.4.6) and the
// CCM89 paper's Table 3.
#include <gtest/gtest.h>

#include <cmath>
#include <sstream>

#include "rungcal/core/error.hpp"
#include "rungcal/extinction/extinction.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

struct LawCase {
  ExtinctionLaw law;
  const char* python_name;
};

class AgainstPythonExtinction : public ::testing::TestWithParam<LawCase> {};

TEST_P(AgainstPythonExtinction, AgreesTo1e6RelativeOverTheWholeRange) {
  // Reference: extinction.ccm89 / odonnell94 / fitzpatrick99 (Debian python3-extinction),
  // A_lambda for A_V = 1, at 240 wavelengths log-spaced over the law's range, 4 values of R_V.
  // rungcal's Fitzpatrick 1999 is the FM_UNRED variant that library implements.
  const LawCase& c = GetParam();
  WavelengthRange range = law_range(c.law);
  auto r =
      test::run_python(R"(
import sys, numpy as np, extinction
law = getattr(extinction, sys.argv[1]); lo, hi = float(sys.argv[2]), float(sys.argv[3])
w = np.geomspace(lo * 1.0000001, hi * 0.9999999, 240)
for rv in (2.5, 3.1, 4.0, 5.0):
    for wi, a in zip(w, law(w, 1.0, rv)):
        print(rv, repr(wi), repr(a))
)",
                       {c.python_name, std::to_string(range.min_aa), std::to_string(range.max_aa)});
  ASSERT_EQ(r.exit_code, 0) << r.output;
  std::istringstream in(r.output);
  double rv, w, ref;
  int n = 0;
  double worst = 0;
  while (in >> rv >> w >> ref) {
    double mine = extinction_ratio(c.law, w, rv);
    worst = std::max(worst, std::abs(mine / ref - 1.0));
    ++n;
  }
  EXPECT_EQ(n, 960);
  EXPECT_LT(worst, 1e-6) << c.python_name;
}

INSTANTIATE_TEST_SUITE_P(Laws, AgainstPythonExtinction,
                         ::testing::Values(LawCase{ExtinctionLaw::kCCM89, "ccm89"},
                                           LawCase{ExtinctionLaw::kOD94, "odonnell94"},
                                           LawCase{ExtinctionLaw::kF99, "fitzpatrick99"}),
                         [](const auto& i) { return std::string(i.param.python_name); });

TEST(Ccm89, Table3AtRv31WithinTheTablesRounding) {
  // Cardelli, Clayton & Mathis 1989, ApJ 345, 245, Table 3, A/A_V at R_V = 3.1. Band
  // wavelengths (memory): U 0.365, B 0.44, V 0.55, R 0.70, I 0.90, J 1.25, H 1.6, K 2.2 um.
  // The formula gives B 1.323 against the table's 1.337 (method brief): rtol 0.016.
  struct Row {
    double um, table;
  };
  const Row rows[] = {{0.365, 1.569}, {0.44, 1.337}, {0.55, 1.000}, {0.70, 0.751},
                      {0.90, 0.479},  {1.25, 0.282}, {1.6, 0.190},  {2.2, 0.114}};
  for (const auto& row : rows)
    EXPECT_NEAR(extinction_ratio(ExtinctionLaw::kCCM89, row.um * 1e4, 3.1), row.table,
                0.016 * row.table)
        << row.um;
}

TEST(Extinction, RefusesToExtrapolate) {
  for (double w : {999.0, 33400.0}) {
    try {
      extinction_ratio(ExtinctionLaw::kCCM89, w, 3.1);
      ADD_FAILURE() << w;
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "outside_law_range");
    }
  }
  EXPECT_THROW(extinction_ratio(ExtinctionLaw::kF99, 65000.0, 3.1), InputError);
  EXPECT_NO_THROW(extinction_ratio(ExtinctionLaw::kF99, 59000.0, 3.1));
  EXPECT_THROW(extinction_ratio(ExtinctionLaw::kF99, 5500.0, 0.0), InputError);
}

TEST(Extinction, CardelliLawsEqualOneAtTheirVAnchor) {
  // CCM89 and O'Donnell 1994 are normalised at x = 1.82 (y = 0: a = 1, b = 0). Fitzpatrick
  // 1999 is normalised to E(B-V) instead: its 5470 A knot is 3.0546 / 3.1 = 0.985 A_V.
  EXPECT_NEAR(extinction_ratio(ExtinctionLaw::kCCM89, 1e4 / 1.82, 3.1), 1.0, 1e-12);
  EXPECT_NEAR(extinction_ratio(ExtinctionLaw::kOD94, 1e4 / 1.82, 3.1), 1.0, 1e-12);
  EXPECT_NEAR(extinction_ratio(ExtinctionLaw::kF99, 5470.0, 3.1), 3.0546 / 3.1, 1e-4);
}

}  // namespace
}  // namespace rungcal
