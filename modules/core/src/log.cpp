#include "wavestack/core/log.hpp"

#include <cstdio>
#include <mutex>
#include <set>

namespace wavestack::log {
namespace {
std::mutex mutex;
Level current = Level::info;
std::vector<std::string> recorded;
std::size_t dropped = 0; // recorded past max_kept: printed, counted, not kept
std::set<std::string> once_keys;
int dropping = 0; // live DroppedWarnings

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
  if (dropping > 0) return;
  if (!once_key.empty() && !once_keys.insert(once_key).second) return;
  if (recorded.size() < max_kept) recorded.push_back(m);
  else ++dropped;
  if (current <= Level::warning) print("warning: ", m);
}
std::vector<std::string> warnings() {
  std::lock_guard lock(mutex);
  return recorded;
}
std::vector<std::string> warnings_since(std::size_t first) {
  std::lock_guard lock(mutex);
  if (first >= recorded.size()) return {};
  return {recorded.begin() + static_cast<std::ptrdiff_t>(first), recorded.end()};
}
std::size_t warnings_dropped() {
  std::lock_guard lock(mutex);
  return dropped;
}
void clear_warnings() {
  std::lock_guard lock(mutex);
  recorded.clear();
  dropped = 0;
  once_keys.clear();
}

DroppedWarnings::DroppedWarnings() {
  std::lock_guard lock(mutex);
  ++dropping;
}
DroppedWarnings::~DroppedWarnings() {
  std::lock_guard lock(mutex);
  --dropping;
}

} // namespace wavestack::log
