#pragma once
// The wavestack::Error a call throws, or a failed test when it throws none.
#include "wavestack/core/error.hpp"

#include <catch2/catch.hpp>

namespace wavestack_test {
template <class F> wavestack::Error error_of(F&& f) {
  try {
    f();
  } catch (const wavestack::Error& e) {
    return e;
  }
  FAIL("no wavestack::Error was thrown");
  throw; // not reached
}
} // namespace wavestack_test
