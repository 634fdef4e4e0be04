#include "wavestack/core/error.hpp"
#include "wavestack/core/field.hpp"
#include "wavestack/core/image.hpp"

#include <catch2/catch.hpp>
#include <cstdint>

using namespace wavestack;

TEST_CASE("images are 64-byte aligned and keep capacity on shrinking resize") {
  Image<float> a(7, 13, 1.5f);
  CHECK(reinterpret_cast<std::uintptr_t>(a.data()) % 64 == 0);
  CHECK(a(6, 12) == 1.5f);
  const float* p = a.data();
  a.resize(3, 5);
  CHECK(a.data() == p); // no reallocation: plan-time buffers never allocate again
  CHECK(a.size() == 15);
  Image<cfloat> c(5, 3);
  CHECK(reinterpret_cast<std::uintptr_t>(c.data()) % 64 == 0);
}

TEST_CASE("views address sub-windows and copies are deep") {
  Image<int> a(4, 6);
  for (std::size_t y = 0; y < 4; ++y)
    for (std::size_t x = 0; x < 6; ++x) a(y, x) = static_cast<int>(10 * y + x);
  auto v = a.view().sub(1, 2, 2, 3);
  CHECK(v(0, 0) == 12);
  CHECK(v(1, 2) == 24);
  CHECK(v.stride() == 6);
  CHECK_FALSE(v.contiguous());
  Image<int> b = a;
  b(0, 0) = 99;
  CHECK(a(0, 0) == 0);
}

TEST_CASE("errors format file:line:column, key, dataset and frame") {
  ErrorContext ctx;
  ctx.file = "p.toml";
  ctx.line = 14;
  ctx.column = 12;
  ctx.key = "distance";
  Error e(ErrorKind::config, "expected a length", ctx);
  CHECK(std::string(e.what()) == "p.toml:14:12: distance: expected a length");
  CHECK(e.exit_code() == 2);
  ErrorContext more;
  more.dataset = "/holograms";
  more.frame = 7;
  Error f = Error(ErrorKind::input, "frame is all NaN").with(more);
  CHECK(std::string(f.what()) == "frame is all NaN (dataset /holograms, frame 7)");
  CHECK(f.exit_code() == 3);
}

TEST_CASE("grid gives the wavelength in the medium") {
  Grid g;
  g.wavelength = 632.8e-9;
  g.medium_index = 1.333;
  CHECK(g.medium_wavelength() == Approx(632.8e-9 / 1.333));
}
