// SPDX-License-Identifier: MIT
#include "rungcal/core/config.hpp"

#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>

#include <fmt/format.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/provenance.hpp"

namespace rungcal {

namespace {

const char* toml_type_name(const toml::node& n) {
  switch (n.type()) {
    case toml::node_type::string:
      return "a string";
    case toml::node_type::integer:
      return "an integer";
    case toml::node_type::floating_point:
      return "a number";
    case toml::node_type::boolean:
      return "a boolean";
    case toml::node_type::table:
      return "a table";
    case toml::node_type::array:
      return "an array";
    default:
      return "a date or time";
  }
}

void walk_unknown(const toml::table& t, const std::string& prefix,
                  const std::set<std::string>& known, const std::string& file) {
  for (const auto& [k, v] : t) {
    std::string path = prefix.empty() ? std::string(k.str()) : prefix + "." + std::string(k.str());
    if (!known.count(path)) {
      throw InputError(
          {file, static_cast<std::int64_t>(v.source().begin.line), path, "line", "key"},
          "unknown_config_key",
          "this key is not a rungcal setting here (misspelt, or in the wrong section)");
    }
    if (const auto* sub = v.as_table()) walk_unknown(*sub, path, known, file);
    if (const auto* arr = v.as_array()) {
      for (std::size_t i = 0; i < arr->size(); ++i)
        if (const auto* st = (*arr)[i].as_table())
          walk_unknown(*st, fmt::format("{}[{}]", path, i), known, file);
    }
  }
}

}  // namespace

ConfigSection::ConfigSection(Config* config, const toml::table* table, std::string path)
    : config_(config), table_(table), path_(std::move(path)) {}

std::string ConfigSection::key_path(const std::string& key) const {
  return path_.empty() ? key : path_ + "." + key;
}

const toml::node* ConfigSection::node(const std::string& key) const {
  const toml::node* n = table_ ? table_->get(key) : nullptr;
  if (n) config_->mark_known(key_path(key));
  return n;
}

std::int64_t ConfigSection::line_of(const std::string& key) const {
  const toml::node* n = table_ ? table_->get(key) : nullptr;
  return n ? static_cast<std::int64_t>(n->source().begin.line) : 0;
}

void ConfigSection::fail(const std::string& key, const std::string& message) const {
  std::int64_t line = line_of(key);
  InputLocation where{config_->file(), {}, key_path(key), "line", "key"};
  if (line > 0) where.row = line;
  throw InputError(where, "config_value", message);
}

bool ConfigSection::has(const std::string& key) const { return table_ && table_->contains(key); }
bool ConfigSection::is_table(const std::string& key) const {
  const auto* n = table_ ? table_->get(key) : nullptr;
  return n && n->is_table();
}
bool ConfigSection::is_string(const std::string& key) const {
  const auto* n = table_ ? table_->get(key) : nullptr;
  return n && n->is_string();
}

std::vector<std::string> ConfigSection::keys() const {
  std::vector<std::string> out;
  if (!table_) return out;
  for (const auto& [k, v] : *table_) {
    out.emplace_back(k.str());
    config_->mark_known(key_path(out.back()));
  }
  return out;
}

std::optional<std::string> ConfigSection::get_string(const std::string& key) const {
  const toml::node* n = node(key);
  if (!n) return std::nullopt;
  if (!n->is_string()) fail(key, fmt::format("must be a string, not {}", toml_type_name(*n)));
  return n->as_string()->get();
}

std::string ConfigSection::string_or(const std::string& key, const std::string& fallback) const {
  return get_string(key).value_or(fallback);
}

std::string ConfigSection::require_string(const std::string& key) const {
  auto v = get_string(key);
  if (!v) {
    throw InputError({config_->file(), {}, key_path(key), "line", "key"}, "config_missing_key",
                     "this key is required");
  }
  return *v;
}

std::optional<double> ConfigSection::get_number(const std::string& key) const {
  const toml::node* n = node(key);
  if (!n) return std::nullopt;
  if (n->is_integer()) return static_cast<double>(n->as_integer()->get());
  if (!n->is_floating_point())
    fail(key, fmt::format("must be a number, not {}", toml_type_name(*n)));
  // TOML allows nan and inf; no rungcal setting gives them a meaning, and a NaN limit
  // compares false both ways, switching its check off unseen (max_ruwe = nan, issue 15).
  const double v = n->as_floating_point()->get();
  if (!std::isfinite(v)) fail(key, fmt::format("must be a finite number, not {}", v));
  return v;
}

double ConfigSection::number_or(const std::string& key, double fallback) const {
  return get_number(key).value_or(fallback);
}

std::optional<std::int64_t> ConfigSection::get_integer(const std::string& key) const {
  const toml::node* n = node(key);
  if (!n) return std::nullopt;
  if (!n->is_integer()) fail(key, fmt::format("must be an integer, not {}", toml_type_name(*n)));
  return n->as_integer()->get();
}

std::int64_t ConfigSection::integer_or(const std::string& key, std::int64_t fallback) const {
  return get_integer(key).value_or(fallback);
}

bool ConfigSection::bool_or(const std::string& key, bool fallback) const {
  const toml::node* n = node(key);
  if (!n) return fallback;
  if (!n->is_boolean()) fail(key, fmt::format("must be true or false, not {}", toml_type_name(*n)));
  return n->as_boolean()->get();
}

std::optional<std::vector<std::string>> ConfigSection::get_string_list(
    const std::string& key) const {
  const toml::node* n = node(key);
  if (!n) return std::nullopt;
  if (n->is_string()) return std::vector<std::string>{n->as_string()->get()};
  const auto* arr = n->as_array();
  if (!arr) fail(key, fmt::format("must be a list of strings, not {}", toml_type_name(*n)));
  std::vector<std::string> out;
  for (const auto& el : *arr) {
    if (!el.is_string()) fail(key, "every element must be a string");
    out.push_back(el.as_string()->get());
  }
  return out;
}

std::optional<std::vector<double>> ConfigSection::get_number_list(const std::string& key) const {
  const toml::node* n = node(key);
  if (!n) return std::nullopt;
  const auto* arr = n->as_array();
  if (!arr) fail(key, fmt::format("must be a list of numbers, not {}", toml_type_name(*n)));
  return numbers_of(*arr, key, "");
}

std::vector<double> ConfigSection::numbers_of(const toml::array& arr, const std::string& key,
                                              const std::string& where) const {
  std::vector<double> out;
  for (const auto& el : arr) {
    if (el.is_integer())
      out.push_back(static_cast<double>(el.as_integer()->get()));
    else if (el.is_floating_point() && std::isfinite(el.as_floating_point()->get()))
      out.push_back(el.as_floating_point()->get());
    else if (el.is_floating_point())
      fail(key, fmt::format("{}every element must be a finite number, not {}", where,
                            el.as_floating_point()->get()));
    else
      fail(key, where + "every element must be a number");
  }
  return out;
}

std::optional<std::vector<std::vector<double>>> ConfigSection::get_number_rows(
    const std::string& key) const {
  const toml::node* n = node(key);
  if (!n) return std::nullopt;
  const auto* arr = n->as_array();
  if (!arr) fail(key, fmt::format("must be a list of rows of numbers, not {}", toml_type_name(*n)));
  std::vector<std::vector<double>> rows;
  for (const auto& row : *arr) {
    const auto* r = row.as_array();
    if (!r) fail(key, fmt::format("row {} must be a list of numbers", rows.size() + 1));
    rows.push_back(numbers_of(*r, key, fmt::format("row {}: ", rows.size() + 1)));
  }
  return rows;
}

std::optional<ConfigSection> ConfigSection::section(const std::string& key) const {
  const toml::node* n = node(key);
  if (!n) return std::nullopt;
  if (!n->is_table()) fail(key, fmt::format("must be a table, not {}", toml_type_name(*n)));
  return ConfigSection(config_, n->as_table(), key_path(key));
}

std::vector<ConfigSection> ConfigSection::section_list(const std::string& key) const {
  std::vector<ConfigSection> out;
  const toml::node* n = node(key);
  if (!n) return out;
  const auto* arr = n->as_array();
  if (!arr)
    fail(key, fmt::format("must be an array of tables ([[{}]]), not {}", key, toml_type_name(*n)));
  for (std::size_t i = 0; i < arr->size(); ++i) {
    const auto* t = (*arr)[i].as_table();
    if (!t) fail(key, "every element must be a table");
    out.emplace_back(config_, t, fmt::format("{}[{}]", key_path(key), i));
  }
  return out;
}

namespace {

// toml++ keeps a table's keys sorted and writes values in one form, and a parsed table
// holds no comments.
std::string canonical_text(const toml::table& table) {
  std::ostringstream out;
  out << toml::toml_formatter{table};
  return out.str();
}

}  // namespace

Config Config::from_string(const std::string& text, const std::string& name) {
  Config c;
  c.file_ = name;
  c.folder_ = std::filesystem::path(name).parent_path().string();
  try {
    c.table_ = toml::parse(text, name);
  } catch (const toml::parse_error& e) {
    throw InputError({name, static_cast<std::int64_t>(e.source().begin.line), {}, "line", "key"},
                     "config_syntax", std::string(e.description()));
  }
  c.sha256_ = sha256_hex(canonical_text(c.table_));
  return c;
}

std::string canonical_config_text(const std::string& text) {
  try {
    return canonical_text(toml::parse(text));
  } catch (const toml::parse_error&) {
    return text;
  }
}

Config Config::from_file(const std::string& path) {
  // A folder or a FIFO is refused at once, not read as an empty config or waited on.
  return from_string(read_input_file(path), path);
}

ConfigSection Config::root() { return ConfigSection(this, &table_, ""); }

std::string Config::resolve_path(const std::string& path) const {
  std::filesystem::path p(path);
  if (p.is_absolute() || folder_.empty()) return path;
  return (std::filesystem::path(folder_) / p).lexically_normal().string();
}

void Config::check_unknown_keys() const { walk_unknown(table_, "", known_, file_); }

}  // namespace rungcal
