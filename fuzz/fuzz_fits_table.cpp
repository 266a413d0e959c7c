// SPDX-License-Identifier: MIT
// Fuzz target: the FITS binary-table reader, on whole files (a corrupt header, truncated
// data, odd TFORMs, wrong NAXIS2). A clean InputError is the expected answer; anything else
// is a bug.
#include <unistd.h>

#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <string>
#include <vector>

#include "rungcal/core/error.hpp"
#include "rungcal/table/fits_io.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  static const std::string path = "/tmp/rungcal-fuzz-" + std::to_string(::getpid()) + ".fits";
  std::FILE* f = std::fopen(path.c_str(), "wb");
  if (!f) return 0;
  std::fwrite(data, 1, size, f);
  std::fclose(f);
  try {
    rungcal::SourceTable t = rungcal::read_fits_table(path);
    for (std::size_t c = 0; c < t.table.columns(); ++c)
      for (std::size_t r = 0; r < t.table.rows() && r < 1000; ++r)
        (void)t.table.column(c).as_real(r);
    // Again with every vector and variable-length column read as arrays (Gaia epoch layout).
    std::vector<std::string> arrays;
    for (const auto& [name, why] : t.unusable_columns) arrays.push_back(name);
    if (!arrays.empty()) (void)rungcal::read_fits_table(path, {}, arrays);
  } catch (const rungcal::InputError&) {
  }
  std::remove(path.c_str());
  return 0;
}
