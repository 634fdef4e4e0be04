// z-stack products (N,Z,h,w) and per-object tables, read back by h5py
// (tests/io/check_stack_table.py) as the outside reference.
#include "io_test.hpp"
#include "wavestack/io/frame_sink.hpp"

#include <catch2/catch.hpp>

using namespace wavestack;
using namespace wavestack::io;

namespace {
// Value of frame n, plane z, pixel (y, x); the script computes the same.
float value(std::size_t n, std::size_t z, std::size_t y, std::size_t x) {
  return static_cast<float>(1000 * n + 100 * z + 10 * y + x) * 0.5f;
}
} // namespace

TEST_CASE("z-stack images are (N,Z,h,w) with one frame per chunk, plain and compressed") {
  for (int level : {0, 3}) {
    io_test::TempDir dir("stack" + std::to_string(level));
    const std::string out = dir / "s.h5";
    const std::size_t n = 2, z = 3, h = 4, w = 5;
    CompressionOptions comp;
    if (level) {
      comp.method = Compression::deflate;
      comp.level = level;
    }
    FrameSink sink = FrameSink::create(out, n, SinkInfo{}, comp);
    Grid g;
    g.dy = g.dx = 1e-7;
    g.wavelength = 6e-7;
    auto re = sink.add_stack("amplitude", ImageType::f32, z, h, w, "1", g, false);
    auto cx = sink.add_stack("field", ImageType::complex64, z, h, w, "1", g, false);
    Image<float> a(z * h, w);
    Image<cfloat> c(z * h, w);
    std::vector<unsigned char> packed;
    for (std::size_t f = 0; f < n; ++f) {
      for (std::size_t p = 0; p < z; ++p)
        for (std::size_t y = 0; y < h; ++y)
          for (std::size_t x = 0; x < w; ++x) {
            a(p * h + y, x) = value(f, p, y, x);
            c(p * h + y, x) = cfloat(value(f, p, y, x), -value(f, p, y, x));
          }
      if (level) {
        sink.compress_frame(re, a.view(), packed);
        sink.write_frame_compressed(re, f, packed.data(), packed.size());
        sink.compress_frame(cx, c.view(), packed);
        sink.write_frame_compressed(cx, f, packed.data(), packed.size());
      } else {
        sink.write_frame(re, f, a.view());
        sink.write_frame(cx, f, c.view());
      }
      sink.mark_done(f, static_cast<std::int64_t>(f));
    }
    // Two objects in frame 0, one in frame 1: frame, id, area (float).
    sink.write_table("objects", {{"frame", true, "1"}, {"id", true, "1"}, {"area", false, "um^2"}},
                     {0, 1, 2.5, 0, 2, 3.5, 1, 1, 4.5});
    sink.finish();
    CHECK(io_test::run_python("check_stack_table.py", io_test::quoted(out) + " " + std::to_string(level)) == 0);
  }
}
