// SPDX-License-Identifier: MIT
#include "rungcal/core/file_names.hpp"

#include <filesystem>

#include "rungcal/core/provenance.hpp"

namespace rungcal {
namespace {

constexpr std::size_t kMaxPartBytes = 120;

bool kept_as_is(char c) {
  return (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '.' ||
         c == '_' || c == '+' || c == '-';
}

}  // namespace

std::string file_name_part(const std::string& text) {
  std::string out;
  bool replaced = text.empty() || text.size() > kMaxPartBytes;
  for (std::size_t i = 0; i < text.size() && out.size() < kMaxPartBytes; ++i) {
    const char c = text[i];
    const bool keep = kept_as_is(c) && !(i == 0 && c == '.');
    out += keep ? c : '_';
    replaced = replaced || !keep;
  }
  if (replaced) out += "-" + sha256_hex(text).substr(0, 8);
  return out;
}

std::string path_beside(const std::string& path, const std::string& suffix) {
  const std::filesystem::path p(path);
  return (p.parent_path() / (p.stem().string() + suffix)).string();
}

}  // namespace rungcal
