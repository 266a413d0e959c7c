// SPDX-License-Identifier: MIT
#include "test_util.hpp"

#include <gtest/gtest.h>
#include <sys/wait.h>

#include <array>
#include <cctype>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <set>
#include <sstream>

namespace fs = std::filesystem;

namespace rungcal::test {

TempDir::TempDir() {
  const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
  std::string name = info ? std::string(info->test_suite_name()) + "." + info->name() : "rungcal";
  for (char& c : name)
    if (c == '/') c = '_';
  path_ = (fs::path(RUNGCAL_BIN_DIR).parent_path() / "test_tmp" / name).string();
  fs::remove_all(path_);
  fs::create_directories(path_);
}

TempDir::~TempDir() {
  const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
  if (!info || !info->result()->Failed()) fs::remove_all(path_);
}

std::string shell_quote(const std::string& s) {
  std::string out = "'";
  for (char c : s) {
    if (c == '\'')
      out += "'\\''";
    else
      out += c;
  }
  return out + "'";
}

CommandResult run_command(const std::string& command_line) {
  CommandResult r;
  std::string cmd = command_line + " 2>&1";
  FILE* pipe = ::popen(cmd.c_str(), "r");
  if (!pipe) return r;
  std::array<char, 4096> buf{};
  std::size_t n;
  while ((n = std::fread(buf.data(), 1, buf.size(), pipe)) > 0) r.output.append(buf.data(), n);
  int status = ::pclose(pipe);
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  return r;
}

CommandResult run_stage(const std::string& stage, const std::string& args) {
  return run_command(std::string(RUNGCAL_BIN_DIR) + "/rungcal-" + stage + " " + args);
}

CommandResult run_python(const std::string& script, const std::vector<std::string>& args) {
  std::string cmd = std::string(RUNGCAL_PYTHON) + " -c " + shell_quote(script);
  for (const auto& a : args) cmd += " " + shell_quote(a);
  return run_command(cmd);
}

void write_text(const std::string& path, const std::string& content) {
  fs::create_directories(fs::path(path).parent_path());
  std::ofstream f(path, std::ios::binary);
  f << content;
}

std::string doc_section(const std::string& page, const std::string& heading) {
  const std::string doc = read_text(source_file("docs/" + page));
  const auto start = doc.find("## " + heading);
  if (start == std::string::npos) return "";
  return doc.substr(start, doc.find("\n## ", start + 1) - start);
}

namespace {

bool is_name_char(char c) { return std::isalnum(static_cast<unsigned char>(c)) != 0 || c == '_'; }

bool names_word(const std::string& text, const std::string& word) {
  for (auto at = text.find(word); at != std::string::npos; at = text.find(word, at + 1)) {
    const bool starts = at == 0 || !is_name_char(text[at - 1]);
    const bool ends = at + word.size() == text.size() || !is_name_char(text[at + word.size()]);
    if (starts && ends) return true;
  }
  return false;
}

void collect_undocumented(const nlohmann::json& node, const std::string& path,
                          const std::string& documentation, std::set<std::string>& missing) {
  if (node.is_array()) {
    for (const auto& item : node) collect_undocumented(item, path + "[]", documentation, missing);
    return;
  }
  if (!node.is_object()) return;
  for (const auto& [key, value] : node.items()) {
    const std::string here = path.empty() ? key : path + "." + key;
    if (!names_word(documentation, key)) missing.insert(here);
    collect_undocumented(value, here, documentation, missing);
  }
}

}  // namespace

std::vector<std::string> undocumented_keys(const nlohmann::json& document,
                                           const std::string& documentation) {
  std::set<std::string> missing;
  collect_undocumented(document, "", documentation, missing);
  return {missing.begin(), missing.end()};
}

std::string read_text(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  std::stringstream ss;
  ss << f.rdbuf();
  return ss.str();
}

bool file_exists(const std::string& path) { return fs::exists(path); }
std::string reference_file(const std::string& name) {
  return std::string(RUNGCAL_REFERENCE_DIR) + "/" + name;
}
std::string source_file(const std::string& relative) {
  return std::string(RUNGCAL_SOURCE_DIR) + "/" + relative;
}

}  // namespace rungcal::test

namespace rungcal::test {

std::string replaced(std::string text,
                     const std::vector<std::pair<std::string, std::string>>& edits) {
  for (const auto& [from, to] : edits)
    for (auto p = text.find(from); p != std::string::npos; p = text.find(from, p + to.size()))
      text.replace(p, from.size(), to);
  return text;
}

std::vector<double> parse_numbers(const std::string& text) {
  std::istringstream in(text);
  std::vector<double> v;
  double x;
  while (in >> x) v.push_back(x);
  return v;
}

}  // namespace rungcal::test
