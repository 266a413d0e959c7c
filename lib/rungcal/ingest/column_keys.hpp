// SPDX-License-Identifier: MIT
#pragma once

#include <string>

namespace rungcal {

// The message for a [columns] key that is not a catalog quantity: the key the user most
// likely meant (a catalog column name such as parallax_mas names its key, parallax; a
// misspelling gets the closest key by edit distance), or the list of keys, and where they
// are documented (docs/file-formats.md, "Column map").
std::string unknown_column_key_message(const std::string& key);

}  // namespace rungcal
