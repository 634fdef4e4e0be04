#include "wavestack/pipeline/params.hpp"

#include "wavestack/core/units.hpp"

#include <sstream>

namespace wavestack::pipeline {

ErrorContext position(const std::string& file, const toml::node& node) {
  ErrorContext c;
  // A node merged in from another file (the instrument profile) remembers it.
  c.file = node.source().path ? *node.source().path : file;
  const auto& src = node.source();
  c.line = static_cast<int>(src.begin.line);
  c.column = static_cast<int>(src.begin.column);
  return c;
}

std::string type_name(const toml::node& node) {
  switch (node.type()) {
  case toml::node_type::string: return "a string";
  case toml::node_type::integer: return "an integer";
  case toml::node_type::floating_point: return "a number";
  case toml::node_type::boolean: return "a boolean";
  case toml::node_type::array: return "an array";
  case toml::node_type::table: return "a table";
  case toml::node_type::date: return "a date";
  case toml::node_type::time: return "a time";
  case toml::node_type::date_time: return "a date-time";
  default: return "nothing";
  }
}

namespace {
std::string show(const toml::node& n) {
  std::ostringstream s;
  if (auto str = n.as_string()) s << '"' << str->get() << '"';
  else if (auto i = n.as_integer()) s << i->get();
  else if (auto f = n.as_floating_point()) s << f->get();
  else if (auto b = n.as_boolean()) s << (b->get() ? "true" : "false");
  else s << type_name(n);
  return s.str();
}
} // namespace

Params::Params(const toml::table& table, std::string file, std::string where)
    : table_(&table), file_(std::move(file)), where_(std::move(where)) {}

bool Params::has(std::string_view key) const { return table_->contains(key); }

const toml::node* Params::lookup(std::string_view key) {
  used_.insert(std::string(key));
  return table_->get(key);
}

ErrorContext Params::at(std::string_view key) const {
  ErrorContext c;
  c.file = file_;
  c.key = std::string(key);
  if (const toml::node* n = table_->get(key)) {
    if (n->source().path) c.file = *n->source().path;
    c.line = static_cast<int>(n->source().begin.line);
    c.column = static_cast<int>(n->source().begin.column);
    if (c.line == 0 || c.file == "--set") { // a value given on the command line has no place in a file
      c.file = "--set";
      c.line = c.column = 0;
    }
  } else {
    c.line = static_cast<int>(table_->source().begin.line);
    c.column = static_cast<int>(table_->source().begin.column);
  }
  return c;
}

void Params::fail(std::string_view key, const std::string& message) const {
  ErrorContext c = at(key);
  c.key = where_.empty() ? std::string(key) : where_ + ": " + std::string(key);
  throw Error(ErrorKind::config, message, c);
}

std::optional<std::string> Params::string(std::string_view key) {
  const toml::node* n = lookup(key);
  if (!n) return std::nullopt;
  if (auto s = n->as_string()) return s->get();
  fail(key, "expected a string, saw " + show(*n));
}

std::string Params::string(std::string_view key, std::string_view fallback) {
  auto v = string(key);
  return v ? *v : std::string(fallback);
}

std::string Params::choice(std::string_view key, std::initializer_list<std::string_view> choices,
                           std::string_view fallback) {
  auto v = string(key);
  if (!v) return std::string(fallback);
  for (auto c : choices)
    if (*v == c) return *v;
  std::string list;
  for (auto c : choices) list += (list.empty() ? "\"" : ", \"") + std::string(c) + "\"";
  fail(key, "expected one of " + list + ", saw \"" + *v + "\"");
}

std::optional<double> Params::number(std::string_view key) {
  const toml::node* n = lookup(key);
  if (!n) return std::nullopt;
  if (auto f = n->as_floating_point()) return f->get();
  if (auto i = n->as_integer()) return static_cast<double>(i->get());
  fail(key, "expected a number, saw " + show(*n));
}

double Params::number(std::string_view key, double fallback) {
  auto v = number(key);
  return v ? *v : fallback;
}

double Params::number_in(std::string_view key, double lo, double hi, double fallback) {
  auto v = number(key);
  if (!v) return fallback;
  if (!(*v >= lo && *v <= hi)) {
    std::ostringstream s;
    s << "expected a number from " << lo << " to " << hi << ", saw " << *v;
    fail(key, s.str());
  }
  return *v;
}

std::optional<std::int64_t> Params::integer(std::string_view key) {
  const toml::node* n = lookup(key);
  if (!n) return std::nullopt;
  if (auto i = n->as_integer()) return i->get();
  fail(key, "expected an integer, saw " + show(*n));
}

std::optional<bool> Params::boolean(std::string_view key) {
  const toml::node* n = lookup(key);
  if (!n) return std::nullopt;
  if (auto b = n->as_boolean()) return b->get();
  fail(key, "expected true or false, saw " + show(*n));
}

std::optional<double> Params::length(std::string_view key) {
  const toml::node* n = lookup(key);
  if (!n) return std::nullopt;
  if (auto s = n->as_string()) {
    std::string why;
    if (auto v = try_parse_length(s->get(), &why)) return v;
    fail(key, why);
  }
  if (n->is_number())
    fail(key, "expected a length with a unit such as \"" + show(*n) + " um\", saw the bare number " + show(*n));
  fail(key, "expected a length with a unit such as \"12.5 um\", saw " + show(*n));
}

std::optional<std::vector<std::string>> Params::strings(std::string_view key) {
  const toml::node* n = lookup(key);
  if (!n) return std::nullopt;
  const toml::array* a = n->as_array();
  if (!a) fail(key, "expected an array of strings such as [\"phase\"], saw " + show(*n));
  std::vector<std::string> out;
  for (const toml::node& e : *a) {
    if (auto s = e.as_string()) out.push_back(s->get());
    else {
      ErrorContext c = position(file_, e);
      c.key = where_.empty() ? std::string(key) : where_ + ": " + std::string(key);
      throw Error(ErrorKind::config, "expected a string in the array, saw " + show(e), c);
    }
  }
  return out;
}

const toml::node* Params::node(std::string_view key) { return lookup(key); }

std::optional<Params> Params::table(std::string_view key) {
  const toml::node* n = lookup(key);
  if (!n) return std::nullopt;
  const toml::table* t = n->as_table();
  if (!t) fail(key, "expected a table such as { from = \"-20 um\", to = \"20 um\", step = \"1 um\" }, saw " + show(*n));
  return Params(*t, file_, where_.empty() ? std::string(key) : where_ + ": " + std::string(key));
}

void Params::finish() const {
  for (auto&& [k, v] : *table_) {
    if (used_.count(k.str())) continue;
    ErrorContext c;
    c.file = file_;
    c.line = static_cast<int>(k.source().begin.line);
    c.column = static_cast<int>(k.source().begin.column);
    if (k.source().path) c.file = *k.source().path; // a key merged in from the instrument profile
    if (c.line == 0) {
      c.line = static_cast<int>(v.source().begin.line);
      c.column = static_cast<int>(v.source().begin.column);
    }
    if (c.line == 0 || c.file == "--set") {
      c.file = "--set";
      c.line = c.column = 0;
    }
    std::string known;
    for (const auto& u : used_) known += (known.empty() ? "" : ", ") + u;
    c.key = where_.empty() ? std::string(k.str()) : where_ + ": " + std::string(k.str());
    const std::string hint = did_you_mean_in(k.str(), used_);
    throw Error(ErrorKind::config,
                "unknown key \"" + std::string(k.str()) + "\"" +
                    (hint.empty() ? (known.empty() ? "" : "; accepted keys: " + known) : hint),
                c);
  }
}

} // namespace wavestack::pipeline
