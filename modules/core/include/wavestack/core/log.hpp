#pragma once
// Minimal thread-safe log to stderr. Warnings are never silent: each one is
// also kept so the program can write them into the output file's attributes.
#include <cstddef>
#include <string>
#include <vector>

namespace wavestack::log {

enum class Level { debug = 0, info = 1, warning = 2, error = 3, quiet = 4 };

/// Messages below `level` are not printed (warnings are still recorded).
void set_level(Level level);
Level level();

void info(const std::string& message);
void debug(const std::string& message);
/// Print "warning: <message>" and record it. A warning with the same `once_key`
/// (when non-empty) is printed and recorded only the first time.
void warn(const std::string& message, const std::string& once_key = {});

/// Warnings kept for the output file: the first max_kept (a long run with a
/// warning per frame would otherwise grow without bound); later ones are
/// printed and counted (warnings_dropped()).
inline constexpr std::size_t max_kept = 1000;

/// Every warning recorded so far, in order.
std::vector<std::string> warnings();
/// The recorded warnings from index `first` on.
std::vector<std::string> warnings_since(std::size_t first);
std::size_t warnings_dropped();
void clear_warnings();

/// While one of these exists, warn() drops warnings: not printed, not
/// recorded, no once_key used up. For work that is done again later and
/// warns then, e.g. the planning pass over the first frame, which the run
/// processes (and warns about) again.
class DroppedWarnings {
public:
  DroppedWarnings();
  ~DroppedWarnings();
  DroppedWarnings(const DroppedWarnings&) = delete;
  DroppedWarnings& operator=(const DroppedWarnings&) = delete;
};

} // namespace wavestack::log
