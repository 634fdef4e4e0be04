#include "wavestack/core/log.hpp"

#include <cstdio>
#include <mutex>
#include <set>

namespace wavestack::log {
namespace {
std::mutex mutex;
Level current = Level::info;
std::vector<std::string> recorded;
std::set<std::string> once_keys;

void print(const char* prefix, const std::string& m) {
  std::fprintf(stderr, "%s%s\n", prefix, m.c_str());
}
} // namespace

void set_level(Level l) {
  std::lock_guard lock(mutex);
  current = l;
}
Level level() {
  std::lock_guard lock(mutex);
  return current;
}
void info(const std::string& m) {
  std::lock_guard lock(mutex);
  if (current <= Level::info) print("", m);
}
void debug(const std::string& m) {
  std::lock_guard lock(mutex);
  if (current <= Level::debug) print("debug: ", m);
}
void warn(const std::string& m, const std::string& once_key) {
  std::lock_guard lock(mutex);
  if (!once_key.empty() && !once_keys.insert(once_key).second) return;
  recorded.push_back(m);
  if (current <= Level::warning) print("warning: ", m);
}
std::vector<std::string> warnings() {
  std::lock_guard lock(mutex);
  return recorded;
}
void clear_warnings() {
  std::lock_guard lock(mutex);
  recorded.clear();
  once_keys.clear();
}

} // namespace wavestack::log
