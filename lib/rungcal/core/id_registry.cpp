// SPDX-License-Identifier: MIT
#include "rungcal/core/id_registry.hpp"

#include <utility>

namespace rungcal {

IdRegistry::IdRegistry(std::size_t expected) {
  std::size_t size = 1024;
  while (size < 2 * expected) size *= 2;
  slots_.assign(size, Slot{});
}

void IdRegistry::grow() {
  std::vector<Slot> old = std::move(slots_);
  slots_.assign(old.size() * 2, Slot{});
  for (const Slot& s : old)
    if (s.row != kEmpty)
      for (std::size_t i = s.a & (slots_.size() - 1);; i = (i + 1) & (slots_.size() - 1))
        if (slots_[i].row == kEmpty) {
          slots_[i] = s;
          break;
        }
}

}  // namespace rungcal
