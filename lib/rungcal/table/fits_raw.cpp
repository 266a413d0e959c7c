// SPDX-License-Identifier: MIT
#include "rungcal/table/fits_parts.hpp"

#include <bit>
#include <cmath>
#include <cstdint>
#include <limits>
#include <string_view>

#include <fmt/format.h>

namespace rungcal::fits_parts {
namespace {

// Bytes per element of a binary-table TFORM letter; 0 when unknown.
std::size_t tform_bytes(char type) {
  switch (type) {
    case 'L':
    case 'B':
    case 'A':
      return 1;
    case 'I':
      return 2;
    case 'J':
    case 'E':
      return 4;
    case 'K':
    case 'D':
    case 'C':
    case 'P':
      return 8;
    case 'M':
    case 'Q':
      return 16;
    default:
      return 0;
  }
}

template <typename T>
T get_big_endian(const unsigned char* p) {
  std::uint64_t bits = 0;
  for (std::size_t i = 0; i < sizeof(T); ++i) bits = (bits << 8) | p[i];
  if constexpr (sizeof(T) == 8) {
    return std::bit_cast<T>(bits);
  } else if constexpr (sizeof(T) == 4) {
    return std::bit_cast<T>(static_cast<std::uint32_t>(bits));
  } else if constexpr (sizeof(T) == 2) {
    return std::bit_cast<T>(static_cast<std::uint16_t>(bits));
  } else {
    return static_cast<T>(bits);
  }
}

}  // namespace

bool plan_raw_columns(fitsfile* f, int columns, std::size_t& row_bytes,
                      std::vector<std::optional<RawColumn>>& raw) {
  int status = 0;
  LONGLONG naxis1 = 0;
  fits_read_key(f, TLONGLONG, "NAXIS1", &naxis1, nullptr, &status);
  if (status || naxis1 <= 0) return false;
  row_bytes = static_cast<std::size_t>(naxis1);
  std::size_t offset = 0;
  raw.assign(static_cast<std::size_t>(columns), std::nullopt);
  for (int c = 1; c <= columns; ++c) {
    char ttype[FLEN_VALUE] = {0}, tunit[FLEN_VALUE] = {0}, tdisp[FLEN_VALUE] = {0};
    char dtype[FLEN_VALUE] = {0};
    long repeat = 0;
    double scale = 1, zero = 0;
    long nulval = 0;
    fits_get_bcolparms(f, c, ttype, tunit, dtype, &repeat, &scale, &zero, &nulval, tdisp, &status);
    if (status) return false;
    const char type = dtype[0];
    const std::size_t each = tform_bytes(type);
    if (each == 0) return false;
    const std::size_t bytes = (type == 'A' ? 1 : each) * static_cast<std::size_t>(repeat);
    const bool plain = scale == 1.0 && zero == 0.0 && (type == 'A' ? repeat >= 1 : repeat == 1) &&
                       std::string_view("DEKJIBLA").find(type) != std::string_view::npos;
    if (plain) {
      RawColumn rc{type, offset, bytes, false, 0};
      if (std::string_view("KJIB").find(type) != std::string_view::npos) {
        int key_status = 0;
        LONGLONG tnull = 0;
        fits_read_key(f, TLONGLONG, fmt::format("TNULL{}", c).c_str(), &tnull, nullptr,
                      &key_status);
        if (key_status == 0) rc.has_tnull = true, rc.tnull = tnull;
      }
      raw[static_cast<std::size_t>(c - 1)] = rc;
    }
    offset += bytes;
  }
  return offset == row_bytes;
}

void decode_raw_column(const RawColumn& rc, const std::string& name, const std::string& unit,
                       const unsigned char* block, std::size_t row_bytes, std::size_t n,
                       StarTable& table) {
  const unsigned char* at = block + rc.offset;
  switch (rc.type) {
    case 'A': {
      Column& col = table.add_column(name, ColumnType::kText, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        const char* p = reinterpret_cast<const char*>(at);
        std::size_t len = 0;
        while (len < rc.bytes && p[len] != '\0') ++len;
        while (len > 0 && p[len - 1] == ' ') --len;
        col.null[r] = len == 0 ? 1 : 0;
        col.text[r].assign(p, len);
      }
      return;
    }
    case 'L': {
      Column& col = table.add_column(name, ColumnType::kBoolean, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        col.boolean[r] = *at == 'T' ? 1 : 0;
        col.null[r] = *at == 0 ? 1 : 0;
      }
      return;
    }
    case 'D':
    case 'E': {
      Column& col = table.add_column(name, ColumnType::kReal, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        // + 0.0 as cfitsio's scaling (v * 1 + 0) does: -0 reads as 0.
        const double v = (rc.type == 'D' ? get_big_endian<double>(at)
                                         : static_cast<double>(get_big_endian<float>(at))) +
                         0.0;
        const bool null = std::isnan(v);
        col.null[r] = null ? 1 : 0;
        col.real[r] = null ? std::numeric_limits<double>::quiet_NaN() : v;
      }
      return;
    }
    default: {
      Column& col = table.add_column(name, ColumnType::kInteger, unit);
      col.resize(n);
      for (std::size_t r = 0; r < n; ++r, at += row_bytes) {
        LONGLONG v = 0;
        switch (rc.type) {
          case 'K':
            v = get_big_endian<std::int64_t>(at);
            break;
          case 'J':
            v = get_big_endian<std::int32_t>(at);
            break;
          case 'I':
            v = get_big_endian<std::int16_t>(at);
            break;
          default:  // 'B': unsigned byte
            v = *at;
            break;
        }
        const bool null = rc.has_tnull && v == rc.tnull;
        col.null[r] = null ? 1 : 0;
        col.integer[r] = null ? 0 : v;
      }
      return;
    }
  }
}

}  // namespace rungcal::fits_parts
