#pragma once
// Counts operator new calls on the calling thread, so a test can assert
// that a per-frame call allocates nothing (DEVELOPERS.md: plan once, run a
// frame without allocating). Include this header in exactly ONE source file
// of a test executable: it replaces the global operator new/delete. Image
// storage (aligned_alloc) and FFTW (malloc) are not counted; tests cover
// them by checking that data pointers stay the same.
#include <cstddef>
#include <cstdlib>
#include <new>

namespace wavestack_test {
inline thread_local std::size_t new_calls = 0;
} // namespace wavestack_test

void* operator new(std::size_t n) {
  ++wavestack_test::new_calls;
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n) { return ::operator new(n); }
// The nothrow forms too (Catch2 uses them): every plain form must pair with
// the free() below, or a sanitizer's own nothrow new meets our delete.
void* operator new(std::size_t n, const std::nothrow_t&) noexcept {
  ++wavestack_test::new_calls;
  return std::malloc(n ? n : 1);
}
void* operator new[](std::size_t n, const std::nothrow_t& t) noexcept { return ::operator new(n, t); }
void operator delete(void* p, const std::nothrow_t&) noexcept { std::free(p); }
void operator delete[](void* p, const std::nothrow_t&) noexcept { std::free(p); }
void operator delete(void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }
void operator delete[](void* p) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t) noexcept { std::free(p); }
