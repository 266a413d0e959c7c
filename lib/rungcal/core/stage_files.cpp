// SPDX-License-Identifier: MIT
#include "rungcal/core/stage_files.hpp"

#include <glob.h>

#include <algorithm>
#include <filesystem>

namespace rungcal {

void StageFiles::add_input(const std::string& path) {
  if (!path.empty() && std::find(inputs.begin(), inputs.end(), path) == inputs.end())
    inputs.push_back(path);
}

void StageFiles::drop_input(const std::string& path) {
  inputs.erase(std::remove(inputs.begin(), inputs.end(), path), inputs.end());
}

void StageFiles::add_inputs_of(const StageFiles& other) {
  for (const auto& in : other.inputs) add_input(in);
  for (const auto& g : other.input_globs)
    if (std::find(input_globs.begin(), input_globs.end(), g) == input_globs.end())
      input_globs.push_back(g);
}

std::vector<std::string> files_matching(const std::string& pattern) {
  glob_t g{};
  const int rc = ::glob(pattern.c_str(), GLOB_ERR, nullptr, &g);
  std::vector<std::string> files;
  for (std::size_t i = 0; rc == 0 && i < g.gl_pathc; ++i)
    if (std::filesystem::is_regular_file(g.gl_pathv[i])) files.emplace_back(g.gl_pathv[i]);
  ::globfree(&g);
  return files;  // glob(3) sorts its matches
}

std::vector<std::string> input_files_now(const StageFiles& files) {
  StageFiles all;
  for (const auto& in : files.inputs) all.add_input(in);
  for (const auto& g : files.input_globs)
    for (const auto& f : files_matching(g)) all.add_input(f);
  return all.inputs;
}

}  // namespace rungcal
