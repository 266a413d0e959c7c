// SPDX-License-Identifier: MIT
#include "rungcal/core/provenance.hpp"

#include <openssl/evp.h>

#include <array>
#include <ctime>
#include <fstream>
#include <memory>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/version.hpp"

namespace rungcal {
namespace {

struct DigestContext {
  std::unique_ptr<EVP_MD_CTX, decltype(&EVP_MD_CTX_free)> ctx{EVP_MD_CTX_new(), &EVP_MD_CTX_free};
  DigestContext() {
    if (!ctx || EVP_DigestInit_ex(ctx.get(), EVP_sha256(), nullptr) != 1)
      throw std::runtime_error("OpenSSL SHA-256 initialisation failed");
  }
  void update(const char* data, std::size_t n) {
    if (EVP_DigestUpdate(ctx.get(), data, n) != 1)
      throw std::runtime_error("SHA-256 update failed");
  }
  std::string hex() {
    std::array<unsigned char, EVP_MAX_MD_SIZE> md{};
    unsigned int len = 0;
    if (EVP_DigestFinal_ex(ctx.get(), md.data(), &len) != 1)
      throw std::runtime_error("SHA-256 finalisation failed");
    static constexpr char kDigits[] = "0123456789abcdef";
    std::string out;
    for (unsigned int i = 0; i < len; ++i) {
      out += kDigits[md[i] >> 4];
      out += kDigits[md[i] & 15];
    }
    return out;
  }
};

}  // namespace

std::string sha256_hex(const std::string& bytes) {
  DigestContext d;
  d.update(bytes.data(), bytes.size());
  return d.hex();
}

std::string sha256_file(const std::string& path) {
  check_input_file(path);
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError({path, {}, {}}, "unreadable_file", "cannot open the file for reading");
  DigestContext d;
  std::array<char, 1 << 16> buf{};
  while (in) {
    in.read(buf.data(), buf.size());
    d.update(buf.data(), static_cast<std::size_t>(in.gcount()));
  }
  return d.hex();
}

std::string utc_now_iso8601() {
  std::time_t now = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&now, &tm);
  std::array<char, 32> buf{};
  std::strftime(buf.data(), buf.size(), "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf.data();
}

Provenance Provenance::for_stage(const std::string& stage) {
  Provenance p;
  p.stage = stage;
  p.software_version = rungcal::software_version();
  p.software_commit = rungcal::software_commit();
  p.created_utc = utc_now_iso8601();
  return p;
}

}  // namespace rungcal
