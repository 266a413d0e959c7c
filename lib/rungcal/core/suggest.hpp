// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace rungcal {

// Edit distance between two words, letter case ignored: insertions, deletions,
// substitutions and swaps of two neighbouring letters cost 1 each (the "optimal string
// alignment" form of the Damerau-Levenshtein distance; Damerau 1964, Levenshtein 1966).
std::size_t edit_distance(std::string_view a, std::string_view b);

// The candidate closest to a misspelt word, when it is close enough to be the likely
// intent: at most 2 edits, or a third of the word's length for longer words. Ties go to
// the first candidate. nullopt when none is close.
std::optional<std::string> closest_match(std::string_view word,
                                         const std::vector<std::string>& candidates);

}  // namespace rungcal
