// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

namespace rungcal::test {

// A fresh folder under the build tree for one test, removed when the test passes.
class TempDir {
 public:
  TempDir();
  ~TempDir();
  const std::string& path() const { return path_; }
  std::string file(const std::string& name) const { return path_ + "/" + name; }

 private:
  std::string path_;
};

struct CommandResult {
  int exit_code = -1;
  std::string output;  // stdout and stderr together
};

// Runs a shell command line; returns its exit code and output.
CommandResult run_command(const std::string& command_line);
// Runs a rungcal stage executable from the build tree: stage("ingest", "--config x").
CommandResult run_stage(const std::string& stage, const std::string& args);
// Runs Debian's Python (/usr/bin/python3) on an inline script with arguments.
CommandResult run_python(const std::string& script, const std::vector<std::string>& args = {});

// Every number in a whitespace-separated text (a Python script's printout).
std::vector<double> parse_numbers(const std::string& text);

void write_text(const std::string& path, const std::string& content);
std::string read_text(const std::string& path);
bool file_exists(const std::string& path);
// Paths of the shared published reference data and of this source tree.
std::string reference_file(const std::string& name);
std::string source_file(const std::string& relative);
std::string shell_quote(const std::string& s);
// The text of a docs/ page from its "## <heading>" line to the next "## " heading; empty
// when the page has no such heading.
std::string doc_section(const std::string& page, const std::string& heading);
// The keys of a JSON document that the documentation text never names: each as its path
// ("relations[].statistics.chi2"), once. A key counts as named when it stands as a word of
// its own (not inside a longer name such as loss inside loss_scale).
std::vector<std::string> undocumented_keys(const nlohmann::json& document,
                                           const std::string& documentation);
// text with every occurrence of each `from` replaced by its `to`, in order.
std::string replaced(std::string text,
                     const std::vector<std::pair<std::string, std::string>>& edits);

}  // namespace rungcal::test
