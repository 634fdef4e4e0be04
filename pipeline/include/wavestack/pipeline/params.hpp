#pragma once
// Typed, position-aware access to one table of a pipeline file. Every getter
// records the key as used; finish() rejects any key nobody asked for, naming
// file:line:column. Errors say what was expected and what was seen.
#include "wavestack/core/error.hpp"

#include <toml++/toml.h>

#include <initializer_list>
#include <optional>
#include <set>
#include <string>
#include <string_view>
#include <vector>

namespace wavestack::pipeline {

class Params {
public:
  /// `where` names the table in messages, e.g. "stage 2 (propagate)" or "[instrument]".
  Params(const toml::table& table, std::string file, std::string where);

  bool has(std::string_view key) const;

  std::optional<std::string> string(std::string_view key);
  std::string string(std::string_view key, std::string_view fallback);
  /// A string that must be one of `choices`.
  std::string choice(std::string_view key, std::initializer_list<std::string_view> choices,
                     std::string_view fallback);
  std::optional<double> number(std::string_view key);
  double number(std::string_view key, double fallback);
  /// A number with an accepted closed range [lo, hi].
  double number_in(std::string_view key, double lo, double hi, double fallback);
  std::optional<std::int64_t> integer(std::string_view key);
  std::optional<bool> boolean(std::string_view key);
  /// A length written as a string with a unit; a bare number is an error.
  std::optional<double> length(std::string_view key);
  std::optional<std::vector<std::string>> strings(std::string_view key);
  /// Mark a key as used without reading it (the caller reads node() itself).
  const toml::node* node(std::string_view key);
  /// A nested table, e.g. distances = { from = ..., to = ... }.
  std::optional<Params> table(std::string_view key);

  /// Throw for the first key that no getter asked for.
  void finish() const;

  /// Context for an error about `key` (its position when known).
  ErrorContext at(std::string_view key) const;
  [[noreturn]] void fail(std::string_view key, const std::string& message) const;

  const std::string& file() const noexcept { return file_; }
  const std::string& where() const noexcept { return where_; }
  const toml::table& raw() const noexcept { return *table_; }

private:
  const toml::node* lookup(std::string_view key);
  const toml::table* table_;
  std::string file_;
  std::string where_;
  std::set<std::string, std::less<>> used_;
};

/// Position of a TOML node as an ErrorContext (file plus line/column if known).
ErrorContext position(const std::string& file, const toml::node& node);
/// Human-readable TOML type of a node ("string", "integer", ...).
std::string type_name(const toml::node& node);

} // namespace wavestack::pipeline
