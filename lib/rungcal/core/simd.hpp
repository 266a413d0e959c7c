// SPDX-License-Identifier: MIT
#pragma once

#include <bit>
#include <cstdint>

// Hot loops compiled twice, for the generic x86-64 target and for x86-64-v3 (AVX2 + FMA),
// the copy picked at load time by what the processor supports (its features, not its
// model, as "arch=haswell" would be). The build never uses -march=native, so the binaries
// run on any x86-64. Off under sanitizers and other compilers (one generic copy).
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && \
    !defined(__SANITIZE_ADDRESS__)
#define RUNGCAL_VECTOR_CLONES __attribute__((target_clones("arch=x86-64-v3", "default")))
#else
#define RUNGCAL_VECTOR_CLONES
#endif

namespace rungcal {

// e^x for |x| < 700 with no library call, so that loops calling it vectorise: x = n ln2 + r
// with |r| <= ln2 / 2 (ln2 split in two parts, Cody & Waite 1980), e^r by its Taylor series
// to r^13 (truncation r^14 / 14! < 5e-18), 2^n built in the exponent bits. Agrees with
// std::exp to a few ulp (tests/core_test.cpp); no overflow, NaN or subnormal handling:
// callers keep x in range.
inline double exp_vectorisable(double x) {
  constexpr double kLog2e = 1.4426950408889634;
  constexpr double kLn2Hi = 0.693147180369123816490, kLn2Lo = 1.90821492927058770002e-10;
  constexpr double kShift = 0x1.8p52;  // adding it rounds to an integer held in the low bits
  const double t = x * kLog2e + kShift;
  const double n = t - kShift;
  const double r = (x - n * kLn2Hi) - n * kLn2Lo;
  double p = 1.0 / 6227020800.0;  // 1/13!
  p = p * r + 1.0 / 479001600.0;
  p = p * r + 1.0 / 39916800.0;
  p = p * r + 1.0 / 3628800.0;
  p = p * r + 1.0 / 362880.0;
  p = p * r + 1.0 / 40320.0;
  p = p * r + 1.0 / 5040.0;
  p = p * r + 1.0 / 720.0;
  p = p * r + 1.0 / 120.0;
  p = p * r + 1.0 / 24.0;
  p = p * r + 1.0 / 6.0;
  p = p * r + 0.5;
  p = p * r + 1.0;
  p = p * r + 1.0;
  const std::int64_t ni = std::bit_cast<std::int64_t>(t) - std::bit_cast<std::int64_t>(kShift);
  return p * std::bit_cast<double>((ni + 1023) << 52);
}

}  // namespace rungcal
