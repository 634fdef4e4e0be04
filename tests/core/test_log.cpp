// The warning log: what is printed, kept and counted (behaviour of our own
// module; the pipeline-level check is tests/badinput, case "noisy first
// frame ... printed once").
#include "wavestack/core/log.hpp"

#include <catch2/catch.hpp>

using namespace wavestack;

namespace {
struct QuietLog {
  log::Level before = log::level();
  QuietLog() {
    log::set_level(log::Level::quiet);
    log::clear_warnings();
  }
  ~QuietLog() {
    log::clear_warnings();
    log::set_level(before);
  }
};
} // namespace

TEST_CASE("warnings are kept in order and a once-key keeps only the first") {
  const QuietLog q;
  log::warn("a");
  log::warn("b", "key");
  log::warn("b again", "key");
  log::warn("c");
  CHECK(log::warnings() == std::vector<std::string>{"a", "b", "c"});
  CHECK(log::warnings_since(1) == std::vector<std::string>{"b", "c"});
  CHECK(log::warnings_since(5).empty());
}

TEST_CASE("DroppedWarnings drops warnings while it lives, without using up once-keys") {
  const QuietLog q;
  log::warn("before");
  {
    const log::DroppedWarnings outer;
    log::warn("dropped");
    {
      const log::DroppedWarnings inner;
      log::warn("dropped too", "key");
    }
    log::warn("still dropped", "key");
  }
  log::warn("after", "key");
  CHECK(log::warnings() == std::vector<std::string>{"before", "after"});
  CHECK(log::warnings_dropped() == 0); // dropped on purpose, not for lack of room
}

TEST_CASE("past max_kept, warnings are counted instead of kept") {
  const QuietLog q;
  for (std::size_t i = 0; i < log::max_kept + 3; ++i) log::warn(std::string("w").append(std::to_string(i)));
  CHECK(log::warnings().size() == log::max_kept);
  CHECK(log::warnings().back() == std::string("w").append(std::to_string(log::max_kept - 1)));
  CHECK(log::warnings_dropped() == 3);
}
