// StackWriter writes raw stacks that h5py (tests/io/check_stack.py) and
// FrameSource read back.
#include "io_test.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/io/frame_source.hpp"
#include "wavestack/io/stack_writer.hpp"

#include <catch2/catch.hpp>

using namespace wavestack;
using namespace wavestack::io;

TEST_CASE("StackWriter writes a uint16 stack and a float32 single frame that h5py reads") {
  io_test::TempDir dir("stack");
  const std::string path = dir / "raw.h5";
  const std::size_t n = 4, h = 33, w = 47;
  {
    StackWriter stack(path, "/holograms", DType::u16, n, h, w);
    Image<std::uint16_t> frame(h, w);
    for (std::size_t f = 0; f < n; ++f) {
      for (std::size_t y = 0; y < h; ++y)
        for (std::size_t x = 0; x < w; ++x) frame(y, x) = static_cast<std::uint16_t>((7 * f + 3 * y + x) * 11);
      stack.write<std::uint16_t>(f, frame);
    }
    stack.set_attribute("units", std::string("counts"));
    stack.set_attribute("exposure", 0.002);
    stack.set_attribute("frames", std::int64_t{4});
    stack.set_file_attribute("generator", std::string("test"));
    stack.close();
  }
  {
    StackWriter bg(path, "background", DType::f32, 1, h, w, {.single_frame = true, .append = true, .deflate_level = 3});
    // written from a strided window to exercise the memory layout
    Image<float> big(h + 2, w + 5, 99.0f);
    for (std::size_t y = 0; y < h; ++y)
      for (std::size_t x = 0; x < w; ++x)
        big(y + 1, x + 2) = 0.5f * static_cast<float>(y) - 0.25f * static_cast<float>(x);
    bg.write<float>(0, ImageView<const float>(big.view().sub(1, 2, h, w)));
  } // destructor closes
  CHECK(io_test::run_python("check_stack.py", io_test::quoted(path)) == 0);

  FrameSource src = FrameSource::open(path, "/holograms");
  CHECK(src.dtype() == DType::u16);
  Image<float> frame(h, w);
  src.read(3, frame);
  CHECK(frame(32, 46) == static_cast<float>((7 * 3 + 3 * 32 + 46) * 11));
  FrameSource bg = FrameSource::open(path, "/background");
  CHECK(bg.rank() == 2);
  bg.read(0, frame);
  CHECK(frame(10, 20) == 0.5f * 10 - 0.25f * 20);

  // a frame that does not fit is a programming error, not bad data
  StackWriter again(dir / "other.h5", "/x", DType::u8, 1, 16, 16);
  Image<std::uint8_t> wrong(15, 16);
  try {
    again.write<std::uint8_t>(0, wrong);
    FAIL("no error");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::internal);
  }
  try {
    StackWriter nowhere(dir / "missing/x.h5", "/x", DType::u8, 1, 16, 16);
    FAIL("no error");
  } catch (const Error& e) {
    CHECK(e.kind() == ErrorKind::output);
    CHECK_THAT(e.what(), Catch::Contains("missing/x.h5"));
  }
}
