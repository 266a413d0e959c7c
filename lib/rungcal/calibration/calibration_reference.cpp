// SPDX-License-Identifier: MIT
#include "rungcal/calibration/calibration_reference.hpp"

#include <filesystem>

#include "rungcal/calibration/store.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/json_io.hpp"

namespace fs = std::filesystem;

namespace rungcal {

Calibration read_calibration_file(const std::string& path) {
  Calibration cal{read_json_file(path)};
  require_calibration_schema(cal.document, path);
  check_calibration_document(cal.document, path);
  return cal;
}

Calibration load_calibration_reference(const std::string& reference) {
  std::error_code ec;
  if (fs::is_regular_file(reference, ec)) return read_calibration_file(reference);
  if (fs::is_directory(reference, ec)) {
    const fs::path folder(reference);
    if (fs::is_regular_file(folder / "calibration.json", ec))
      return read_calibration_file((folder / "calibration.json").string());
    if (fs::is_symlink(folder / "latest", ec))
      return load_calibration(folder.parent_path().string(),
                              folder.filename().string() + "@latest");
    throw InputError({reference, {}, {}}, "unknown_calibration",
                     "a folder that is neither a version folder (calibration.json) nor a "
                     "calibration's folder (a 'latest' link)");
  }
  const auto at = reference.rfind('@');
  if (at == std::string::npos)
    throw InputError({reference, {}, {}}, "unknown_calibration",
                     "no such file or folder; give STORE/NAME@latest, STORE/NAME@N, a version "
                     "folder or a calibration file");
  const fs::path named(reference.substr(0, at));
  const std::string store = named.has_parent_path() ? named.parent_path().string() : ".";
  if (!fs::is_directory(store, ec))
    throw InputError({store, {}, {}}, "unknown_calibration", "no such store folder");
  return load_calibration(store, named.filename().string() + reference.substr(at));
}

}  // namespace rungcal
