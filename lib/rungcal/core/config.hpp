// SPDX-License-Identifier: MIT
#pragma once

#include <optional>
#include <set>
#include <string>
#include <vector>

#include <toml++/toml.h>

#include "rungcal/core/enum_table.hpp"

namespace rungcal {

class Config;

// A view of one TOML table inside a Config. Every getter marks its key as known, so that
// Config::check_unknown_keys() can name any key that nothing read (a typo such as
// "delimter" must stop the run, not be ignored). Type errors name the file, line and key.
class ConfigSection {
 public:
  ConfigSection(Config* config, const toml::table* table, std::string path);

  bool has(const std::string& key) const;
  std::vector<std::string> keys() const;  // marks every key as known
  const std::string& path() const { return path_; }

  std::optional<std::string> get_string(const std::string& key) const;
  std::string string_or(const std::string& key, const std::string& fallback) const;
  std::string require_string(const std::string& key) const;
  std::optional<double> get_number(const std::string& key) const;
  double number_or(const std::string& key, double fallback) const;
  std::optional<std::int64_t> get_integer(const std::string& key) const;
  std::int64_t integer_or(const std::string& key, std::int64_t fallback) const;
  bool bool_or(const std::string& key, bool fallback) const;
  std::optional<std::vector<std::string>> get_string_list(const std::string& key) const;
  std::optional<std::vector<double>> get_number_list(const std::string& key) const;
  // A list of rows, each a list of numbers (a matrix: [[1, 0], [0, 1]]); rows may differ in
  // length here, the caller checks the shape.
  std::optional<std::vector<std::vector<double>>> get_number_rows(const std::string& key) const;
  std::optional<ConfigSection> section(const std::string& key) const;
  // Sections of an array of tables ([[name]]).
  std::vector<ConfigSection> section_list(const std::string& key) const;
  // A key that is a string or a table: lets `x = "col"` stand for `x = { column = "col" }`.
  bool is_table(const std::string& key) const;
  bool is_string(const std::string& key) const;

  // Throws InputError (rule "config_value") naming this key.
  [[noreturn]] void fail(const std::string& key, const std::string& message) const;
  std::int64_t line_of(const std::string& key) const;

 private:
  const toml::node* node(const std::string& key) const;
  // The elements of a list of numbers; `where` prefixes the message ("row 2: ").
  std::vector<double> numbers_of(const toml::array& arr, const std::string& key,
                                 const std::string& where) const;
  std::string key_path(const std::string& key) const;
  Config* config_;
  const toml::table* table_;
  std::string path_;
};

// A parsed TOML file. Relative paths inside it are resolved against its folder.
class Config {
 public:
  // Throws InputError: "unreadable_file", "config_syntax".
  static Config from_file(const std::string& path);
  static Config from_string(const std::string& text, const std::string& name = "<config>");

  ConfigSection root();
  const std::string& file() const { return file_; }
  // SHA-256 of the parsed content (canonical_config_text), not of the bytes: a comment or
  // layout edit keys nothing anew and publishes no version (issue 15).
  const std::string& sha256() const { return sha256_; }
  // A path from the config: absolute as is, relative against the config file's folder.
  std::string resolve_path(const std::string& path) const;
  // Throws InputError (rule "unknown_config_key") for the first key no getter read.
  void check_unknown_keys() const;

  void mark_known(const std::string& key_path) { known_.insert(key_path); }

 private:
  std::string file_;
  std::string folder_;
  std::string sha256_;
  toml::table table_;
  std::set<std::string> known_;
};

// The TOML text's parsed content written out canonically (keys sorted, no comments, one
// layout), or the text unchanged when it does not parse. Two configs with the same values
// have the same canonical text.
std::string canonical_config_text(const std::string& text);

// A choice read through its name table: fallback when the key is absent; a name not in the
// table stops with rule "config_value", listing the choices.
template <typename E, std::size_t N>
E choice_or(const ConfigSection& s, const std::string& key, const EnumTable<E, N>& table,
            E fallback) {
  std::string v = s.string_or(key, std::string(table.name(fallback)));
  auto parsed = table.parse(v);
  if (!parsed) s.fail(key, "'" + v + "' is not one of: " + table.choices());
  return *parsed;
}

}  // namespace rungcal
