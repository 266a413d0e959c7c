// SPDX-License-Identifier: MIT
// The fit residuals' schema (table/fit_residuals_schema.hpp) against its page in
// docs/file-formats.md ("Fit residuals"): every HDU and column the writer and the readers
// share is documented there. What the writer puts in the file is checked with astropy in
// fit_stage_test.cpp (TheStageWritesItsProductsAndAstropyReadsTheResiduals).
#include <gtest/gtest.h>

#include <string>

#include "rungcal/table/fit_residuals_schema.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

std::string residuals_page() { return test::doc_section("file-formats.md", "Fit residuals"); }

TEST(FitResidualsSchema, EveryColumnAndHduIsDocumented) {
  const std::string page = residuals_page();
  ASSERT_FALSE(page.empty()) << "docs/file-formats.md has no '## Fit residuals' section";
  using namespace residual_col;
  for (const char* name : {kRelation,
                           kId,
                           kKind,
                           kReason,
                           kUsed,
                           kLogPeriodF,
                           kM0,
                           kM0Err,
                           kAbsMagModel,
                           kResidual,
                           kParallaxCorrectedMas,
                           kParallaxErrMas,
                           kPredicted,
                           kFeh,
                           kGaiaGMag,
                           kMembership,
                           kResample,
                           kParameter,
                           kValue,
                           residuals_hdu::kResiduals,
                           residuals_hdu::kBootstrap,
                           kFitResidualsFileName})
    EXPECT_NE(page.find("`" + std::string(name) + "`"), std::string::npos)
        << name << " is not in the docs' 'Fit residuals' section";
}

}  // namespace
}  // namespace rungcal
