// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <limits>
#include <optional>
#include <string_view>
#include <vector>

namespace rungcal {

// Two independent 64-bit hashes of an id (see IdRegistry).
struct IdHash {
  std::uint64_t a = 0, b = 0;
};

// Ids seen so far, with the source row of their first use. Open addressing over two
// independent 64-bit hashes of each id: 24 bytes a slot and one cache line per look-up,
// where a string-keyed map costs a node, a string and several cache misses per id (a
// million-row catalog). Two ids are taken as equal when both hashes agree: the chance
// that two different ids among n do is about n^2 / 2^129 (1e-27 for a million).
// Hashing and look-ups stay inline: they run once per input row.
class IdRegistry {
 public:
  explicit IdRegistry(std::size_t expected);
  static IdHash hash(std::string_view id) {
    return {std::hash<std::string_view>{}(id), second_hash(id)};
  }
  // Starts loading the slot where h's search begins; a look-up soon after finds it cached.
  void prefetch(const IdHash& h) const { __builtin_prefetch(&slots_[h.a & (slots_.size() - 1)]); }
  // The row the id was first seen at; nothing (and the id is recorded at row) when new.
  std::optional<std::int64_t> first_seen(const IdHash& h, std::int64_t row) {
    if (2 * (count_ + 1) > slots_.size()) grow();
    for (std::size_t i = h.a & (slots_.size() - 1);; i = (i + 1) & (slots_.size() - 1)) {
      Slot& s = slots_[i];
      if (s.row == kEmpty) {
        s = {h.a, h.b, row};
        ++count_;
        return std::nullopt;
      }
      if (s.a == h.a && s.b == h.b) return s.row;
    }
  }

 private:
  static constexpr std::int64_t kEmpty = std::numeric_limits<std::int64_t>::min();
  struct Slot {
    std::uint64_t a = 0, b = 0;
    std::int64_t row = kEmpty;
  };
  // FNV-1a, finished with the splitmix64 mixer: independent of std::hash's Murmur.
  static std::uint64_t second_hash(std::string_view id) {
    std::uint64_t h = 0xcbf29ce484222325ull;
    for (unsigned char ch : id) h = (h ^ ch) * 0x100000001b3ull;
    h = (h ^ (h >> 30)) * 0xBF58476D1CE4E5B9ull;
    h = (h ^ (h >> 27)) * 0x94D049BB133111EBull;
    return h ^ (h >> 31);
  }
  void grow();
  std::vector<Slot> slots_;
  std::size_t count_ = 0;
};

}  // namespace rungcal
