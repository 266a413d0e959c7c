// SPDX-License-Identifier: MIT
#include "rungcal/core/suggest.hpp"

#include <algorithm>
#include <cctype>

namespace rungcal {

std::size_t edit_distance(std::string_view a, std::string_view b) {
  auto lower = [](char c) {
    return static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  };
  const std::size_t n = a.size(), m = b.size();
  // d[i][j]: distance between the first i letters of a and the first j of b (three rows kept).
  std::vector<std::size_t> before(m + 1), previous(m + 1), current(m + 1);
  for (std::size_t j = 0; j <= m; ++j) previous[j] = j;
  for (std::size_t i = 1; i <= n; ++i) {
    current[0] = i;
    for (std::size_t j = 1; j <= m; ++j) {
      const bool same = lower(a[i - 1]) == lower(b[j - 1]);
      current[j] =
          std::min({previous[j] + 1, current[j - 1] + 1, previous[j - 1] + (same ? 0 : 1)});
      if (i > 1 && j > 1 && lower(a[i - 1]) == lower(b[j - 2]) &&
          lower(a[i - 2]) == lower(b[j - 1]))
        current[j] = std::min(current[j], before[j - 2] + 1);
    }
    before.swap(previous);
    previous.swap(current);
  }
  return previous[m];
}

std::optional<std::string> closest_match(std::string_view word,
                                         const std::vector<std::string>& candidates) {
  const std::size_t limit = std::max<std::size_t>(2, word.size() / 3);
  std::optional<std::string> best;
  std::size_t best_distance = limit + 1;
  for (const auto& c : candidates) {
    const std::size_t d = edit_distance(word, c);
    if (d < best_distance) {
      best_distance = d;
      best = c;
    }
  }
  return best;
}

}  // namespace rungcal
