// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/core/suggest: edit distance and the closest candidate.
#include <gtest/gtest.h>

#include "rungcal/core/suggest.hpp"

namespace rungcal {
namespace {

TEST(EditDistance, CountsInsertionsDeletionsSubstitutionsAndSwaps) {
  EXPECT_EQ(edit_distance("", ""), 0u);
  EXPECT_EQ(edit_distance("", "abc"), 3u);
  EXPECT_EQ(edit_distance("paralax", "parallax"), 1u);    // insertion
  EXPECT_EQ(edit_distance("parallaxx", "parallax"), 1u);  // deletion
  EXPECT_EQ(edit_distance("parallex", "parallax"), 1u);   // substitution
  EXPECT_EQ(edit_distance("paralalx", "parallax"), 1u);   // two neighbours swapped
  EXPECT_EQ(edit_distance("kitten", "sitting"), 3u);      // the textbook example
  EXPECT_EQ(edit_distance("EBV", "ebv"), 0u);             // letter case ignored
  EXPECT_EQ(edit_distance("ca", "abc"), 3u);  // optimal string alignment: no edit of a swap
}

TEST(ClosestMatch, SuggestsOnlyWhatIsClose) {
  const std::vector<std::string> keys = {"parallax", "parallax_err", "period", "ebv", "feh"};
  EXPECT_EQ(closest_match("paralax", keys), "parallax");
  EXPECT_EQ(closest_match("parallax_error", keys), "parallax_err");
  EXPECT_EQ(closest_match("perod", keys), "period");
  EXPECT_EQ(closest_match("fe_h", keys), "feh");
  EXPECT_FALSE(closest_match("magnitude", keys).has_value());
  EXPECT_FALSE(closest_match("x", {}).has_value());
}

}  // namespace
}  // namespace rungcal
