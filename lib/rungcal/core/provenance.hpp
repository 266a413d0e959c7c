// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <string>
#include <vector>

namespace rungcal {

// SHA-256 (FIPS 180-4, via OpenSSL libcrypto) as 64 lower-case hex digits.
std::string sha256_hex(const std::string& bytes);
// SHA-256 of a file's bytes; throws InputError (rule "unreadable_file") when it can't be read.
std::string sha256_file(const std::string& path);

// Current UTC time as ISO 8601 "YYYY-MM-DDThh:mm:ssZ" (the FITS DATE keyword's form).
std::string utc_now_iso8601();

// One input a product was made from.
struct InputRecord {
  std::string path;        // as given (relative paths stay relative to the config's folder)
  std::string sha256;      // of the file's bytes
  std::int64_t rows = -1;  // data rows read, -1 when not a table
};

// What made a product: stamped into every FITS header and JSON file under the same names
// (docs/file-formats.md, "Provenance").
struct Provenance {
  std::string stage;  // e.g. "ingest"
  std::string software_version;
  std::string software_commit;
  std::string created_utc;    // kept out of content hashes
  std::string config_sha256;  // SHA-256 of the config's parsed content ("" when none)
  std::vector<InputRecord> inputs;

  // Fills version, commit and time for a stage.
  static Provenance for_stage(const std::string& stage);
};

}  // namespace rungcal
