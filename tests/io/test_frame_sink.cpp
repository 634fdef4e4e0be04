// FrameSink: the output file is checked against the DESIGN.md contract by
// tests/io/check_output.py, which reads it with h5py.
#include "io_test.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/io/frame_sink.hpp"
#include "wavestack/io/frame_source.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <thread>

using namespace wavestack;
using namespace wavestack::io;
namespace fs = std::filesystem;

namespace {

const std::string pipeline_text =
    "[input]\npath = \"holograms.h5\"\ndataset = \"/holograms\"\n\n[[stage]]\ntype = \"fringe\"\n";
constexpr std::size_t sweep = 5; // S of check_output.py

Grid test_grid() {
  Grid g;
  g.dy = 86.25e-9;
  g.dx = 90e-9;
  g.wavelength = 632.8e-9;
  g.medium_index = 1.333;
  g.plane = 12.5e-6;
  return g;
}

/// The per-frame images of check_output.py expected().
struct Frame {
  Image<cfloat> field;
  Image<float> amplitude, phase, opd;
};

Frame sink_values(std::size_t f, std::size_t h, std::size_t w) {
  Frame fr{Image<cfloat>(h, w), Image<float>(h, w), Image<float>(h, w), Image<float>(h, w)};
  for (std::size_t y = 0; y < h; ++y)
    for (std::size_t x = 0; x < w; ++x) {
      const double yd = static_cast<double>(y), xd = static_cast<double>(x), fd = static_cast<double>(f);
      const double a = 1 + 0.01 * (yd + 2 * xd) + fd;
      const double p = (xd - static_cast<double>(w) / 2) * 0.01 - (yd - static_cast<double>(h) / 2) * 0.02 + 0.1 * fd;
      fr.amplitude(y, x) = static_cast<float>(a);
      fr.phase(y, x) = static_cast<float>(p);
      fr.field(y, x) = cfloat(static_cast<float>(a * std::cos(p)), static_cast<float>(a * std::sin(p)));
      fr.opd(y, x) = static_cast<float>(50 * std::sin(12.9898 * xd + 78.233 * yd + 3.1 * fd));
    }
  return fr;
}

SinkInfo test_info() { return {"", pipeline_text, "holograms.h5", "/holograms"}; }

struct Products {
  FrameSink::Product field, amplitude, phase, opd, filtered = 0, distances, curve;
  bool with_filtered = false;
};

Products declare(FrameSink& sink, std::size_t h, std::size_t w) {
  const Grid g = test_grid();
  Products p;
  p.field = sink.add_image("field", ImageType::complex64, h, w, "1", g, true);
  p.amplitude = sink.add_image("/amplitude", ImageType::f32, h, w, "1", g, true);
  p.phase = sink.add_image("phase", ImageType::f32, h, w, "rad", g, false, {{"wrapped", std::int64_t{1}}});
  p.opd = sink.add_image("opd", ImageType::f32, h, w, "nm", g, true);
  if (sink.compression().method == Compression::deflate) {
    p.filtered = sink.add_image("check/opd_filtered", ImageType::f32, h, w, "nm", g, true);
    p.with_filtered = true;
  }
  p.distances = sink.add_vector("focus/distances", ValueType::f64, sweep, "m");
  p.curve = sink.add_matrix("focus/curve", ValueType::f64, sink.frames(), sweep, "1");
  double d[sweep];
  for (std::size_t s = 0; s < sweep; ++s) d[s] = -5e-6 + 2.5e-6 * static_cast<double>(s);
  sink.write_all(p.distances, d, sweep);
  sink.set_attribute("/", "warnings", std::string("carrier close to the edge"));
  sink.set_attribute("/", "sideband_radius", 0.33);
  return p;
}

/// Write frame f of every product; compressed frames go through the
/// parallel-stage path (compress_frame + write_frame_compressed), except
/// /amplitude and /check/opd_filtered, which HDF5's filters compress.
void write_frame(FrameSink& sink, const Products& p, std::size_t f, std::size_t h, std::size_t w) {
  const Frame fr = sink_values(f, h, w);
  if (sink.compression().method == Compression::deflate) {
    std::vector<unsigned char> buf;
    sink.compress_frame(p.field, fr.field, buf);
    sink.write_frame_compressed(p.field, f, buf.data(), buf.size());
    sink.compress_frame(p.phase, fr.phase, buf);
    sink.write_frame_compressed(p.phase, f, buf.data(), buf.size());
    sink.compress_frame(p.opd, fr.opd, buf);
    sink.write_frame_compressed(p.opd, f, buf.data(), buf.size());
    sink.write_frame(p.filtered, f, fr.opd);
  } else {
    sink.write_frame(p.field, f, fr.field);
    sink.write_frame(p.phase, f, fr.phase);
    sink.write_frame(p.opd, f, fr.opd);
  }
  sink.write_frame(p.amplitude, f, fr.amplitude);
  double row[sweep];
  for (std::size_t s = 0; s < sweep; ++s) row[s] = static_cast<double>(f * 10 + s);
  sink.write_row(p.curve, f, row, sweep);
  sink.set_focus_distance(f, (static_cast<double>(f) - 1) * 2.5e-6);
  sink.mark_done(f, static_cast<std::int64_t>(10 + 2 * f));
}

std::string check_args(const std::string& file, const char* mode, std::size_t n, std::size_t h, std::size_t w,
                       int level = 0) {
  return io_test::quoted(file) + " " + mode + " " + std::to_string(n) + " " + std::to_string(h) + " " +
         std::to_string(w) + " " + std::to_string(level);
}

template <class F> Error error_of(F&& f) {
  try {
    f();
  } catch (const Error& e) {
    return e;
  }
  FAIL("no wavestack::Error was thrown");
  throw;
}

} // namespace

TEST_CASE("an uncompressed output file follows the contract (checked by h5py)") {
  io_test::TempDir dir("sink_plain");
  const std::string out = dir / "reconstruction.h5";
  const std::size_t n = 3, h = 37, w = 53;
  {
    FrameSink sink = FrameSink::create(out, n, test_info());
    const Products p = declare(sink, h, w);
    for (std::size_t f = 0; f < n; ++f) {
      write_frame(sink, p, f, h, w);
      // while writing, only the temporary name exists
      CHECK(fs::exists(out + ".partial"));
      CHECK_FALSE(fs::exists(out));
    }
    CHECK(sink.done_prefix() == n);
    CHECK(sink.read_done() == std::vector<std::uint8_t>(n, 1));
    sink.finish();
    CHECK(sink.finished());
  }
  CHECK(fs::exists(out));
  CHECK_FALSE(fs::exists(out + ".partial"));
  CHECK(io_test::run_python("check_output.py", check_args(out, "plain", n, h, w)) == 0);
  // and our own reader sees the same root attributes
  CHECK(read_string_attribute(out, "/", "pipeline") == pipeline_text);
  CHECK(read_string_attribute(out, "/", "format") == "wavestack");
}

TEST_CASE("a deflate output decodes in h5py, and direct chunks match HDF5's own filters") {
  io_test::TempDir dir("sink_deflate");
  const std::string out = dir / "compressed.h5";
  const std::size_t n = 3, h = 40, w = 61; // odd width: bytes are no multiple of 8 per row
  for (int level : {1, 6}) {
    {
      FrameSink sink = FrameSink::create(out, n, test_info(), {Compression::deflate, level});
      const Products p = declare(sink, h, w);
      for (std::size_t f = 0; f < n; ++f) write_frame(sink, p, f, h, w);
      sink.finish();
    }
    CHECK(io_test::run_python("check_output.py", check_args(out, "deflate", n, h, w, level)) == 0);
  }
}

TEST_CASE("compress_chunk follows HDF5's shuffle byte order for odd sizes") {
  // 3 elements of 4 bytes and a 2-byte tail. HDF5's shuffle (H5Zshuffle.c)
  // stores byte 0 of every element, then byte 1, ..., then the tail
  // unchanged. Compressing the hand-shuffled bytes with element size 1 (no
  // shuffle) must give the identical zlib stream. (Byte equality with
  // HDF5's own filters on real frames is checked in h5py by check_output.py.)
  const unsigned char in[14] = {0, 1, 2, 3, 10, 11, 12, 13, 20, 21, 22, 23, 98, 99};
  const unsigned char shuffled[14] = {0, 10, 20, 1, 11, 21, 2, 12, 22, 3, 13, 23, 98, 99};
  std::vector<unsigned char> out, ref;
  compress_chunk(in, sizeof in, 4, 9, out);
  compress_chunk(shuffled, sizeof shuffled, 1, 9, ref);
  REQUIRE(out.size() > 2);
  CHECK(out[0] == 0x78); // zlib stream header (RFC 1950), as HDF5's deflate filter writes
  CHECK(out == ref);
  CHECK(error_of([&] { compress_chunk(in, sizeof in, 4, 0, out); }).kind() == ErrorKind::internal);
}

TEST_CASE("an unfinished sink leaves only the partial file, and resume continues it") {
  io_test::TempDir dir("sink_resume");
  const std::string out = dir / "run.h5";
  const std::size_t n = 5, h = 32, w = 33;
  {
    FrameSink sink = FrameSink::create(out, n, test_info());
    const Products p = declare(sink, h, w);
    for (std::size_t f = 0; f < 3; ++f) write_frame(sink, p, f, h, w);
    // destroyed without finish(): the error path
  }
  CHECK(fs::exists(out + ".partial"));
  CHECK_FALSE(fs::exists(out));
  CHECK(FrameSink::read_pipeline_text(out + ".partial") == pipeline_text);
  {
    FrameSink sink = FrameSink::open_for_resume(out + ".partial");
    CHECK(sink.final_path() == out);
    CHECK(sink.frames() == n);
    CHECK(sink.done_prefix() == 3);
    CHECK(sink.read_done() == std::vector<std::uint8_t>{1, 1, 1, 0, 0});
    CHECK(sink.compression().method == Compression::none);
    Products p;
    p.field = sink.product("field");
    p.amplitude = sink.product("/amplitude");
    p.phase = sink.product("phase");
    p.opd = sink.product("opd");
    p.distances = sink.product("focus/distances");
    p.curve = sink.product("focus/curve");
    CHECK(sink.has_product("frames/done"));
    CHECK_FALSE(sink.has_product("nothing"));
    for (std::size_t f = sink.done_prefix(); f < n; ++f) write_frame(sink, p, f, h, w);
    CHECK(sink.done_prefix() == n);
    sink.finish();
  }
  CHECK(fs::exists(out));
  CHECK_FALSE(fs::exists(out + ".partial"));
  CHECK(io_test::run_python("check_output.py", check_args(out, "plain", n, h, w)) == 0);

  // a compressed partial file resumes with the same shuffle + deflate level
  {
    FrameSink sink = FrameSink::create(dir / "packed.h5", 2, test_info(), {Compression::deflate, 3});
    const Products p = declare(sink, h, w);
    write_frame(sink, p, 0, h, w);
  }
  {
    FrameSink sink = FrameSink::open_for_resume(dir / "packed.h5");
    CHECK(sink.compression().method == Compression::deflate);
    CHECK(sink.compression().level == 3);
    CHECK(sink.done_prefix() == 1);
  }

  const Error e = error_of([&] { FrameSink::open_for_resume(dir / "never.h5"); });
  CHECK(e.kind() == ErrorKind::output);
  CHECK_THAT(e.what(), Catch::Contains("no partial output file"));
  // a partial file that is not ours
  { std::ofstream(dir / "alien.h5.partial") << "not hdf5"; }
  CHECK(error_of([&] { FrameSink::open_for_resume(dir / "alien.h5"); }).kind() == ErrorKind::output);
}

TEST_CASE("output errors name the path: missing folder, not a folder, unwritable, failed rename") {
  io_test::TempDir dir("sink_errors");
  {
    const std::string out = dir / "no/such/folder/out.h5";
    const Error e = error_of([&] { FrameSink::create(out, 1, test_info()); });
    CHECK(e.kind() == ErrorKind::output);
    CHECK(e.exit_code() == 4);
    CHECK(e.context().file == out);
    CHECK_THAT(e.what(), Catch::Contains("no/such/folder") && Catch::Contains("does not exist"));
  }
  {
    { std::ofstream(dir / "plainfile") << "x"; }
    const Error e = error_of([&] { FrameSink::create(dir / "plainfile/out.h5", 1, test_info()); });
    CHECK(e.kind() == ErrorKind::output);
    CHECK_THAT(e.what(), Catch::Contains("is not a folder"));
  }
  {
    fs::create_directory(dir / "adir");
    const Error e = error_of([&] { FrameSink::create(dir / "adir", 1, test_info()); });
    CHECK(e.kind() == ErrorKind::output);
    CHECK_THAT(e.what(), Catch::Contains("output path is a folder"));
  }
  if (::geteuid() != 0) {
    // permissions mean nothing to root, so this part runs for normal users
    fs::create_directory(dir / "locked");
    fs::permissions(dir / "locked", fs::perms::owner_read | fs::perms::owner_exec);
    const Error e = error_of([&] { FrameSink::create(dir / "locked/out.h5", 1, test_info()); });
    CHECK(e.kind() == ErrorKind::output);
    CHECK_THAT(e.what(), Catch::Contains("not writable"));
    fs::permissions(dir / "locked", fs::perms::owner_all);
  }
  {
    // a place even root cannot create files in: HDF5's failure becomes Error(output)
    const std::string out = "/proc/wavestack-io-test.h5";
    const Error e = error_of([&] { FrameSink::create(out, 1, test_info()); });
    CHECK(e.kind() == ErrorKind::output);
    CHECK_THAT(e.what(), Catch::Contains(out));
  }
  {
    // the file is complete but the final name is taken by a non-empty folder
    const std::string out = dir / "blocked.h5";
    FrameSink sink = FrameSink::create(out, 1, test_info());
    fs::create_directories(out + "/inside");
    const Error e = error_of([&] { sink.finish(); });
    CHECK(e.kind() == ErrorKind::output);
    CHECK_THAT(e.what(), Catch::Contains(out) && Catch::Contains("could not be renamed") &&
                             Catch::Contains(".partial"));
    CHECK(fs::exists(out + ".partial"));
    // once the way is clear, finish() only retries the rename
    fs::remove_all(out);
    sink.finish();
    CHECK(fs::is_regular_file(out));
  }
}

TEST_CASE("same_file recognises one file under different names") {
  io_test::TempDir dir("same_file");
  const std::string a = dir / "a.h5", b = dir / "b.h5";
  { std::ofstream(a) << "a"; }
  { std::ofstream(b) << "b"; }
  fs::create_hard_link(a, dir / "hard.h5");
  fs::create_symlink(a, dir / "soft.h5");
  CHECK(same_file(a, a));
  CHECK(same_file(a, dir / "hard.h5"));
  CHECK(same_file(a, dir / "soft.h5"));
  CHECK(same_file(a, (dir.path / "." / "a.h5").string()));
  CHECK_FALSE(same_file(a, b));
  CHECK_FALSE(same_file(a, dir / "missing.h5"));
}

TEST_CASE("reading and writing from two threads at once is safe (hdf5_mutex)") {
  io_test::TempDir dir("threads");
  const std::size_t n = 40, h = 24, w = 20;
  // an input written by the sink itself (amplitude product) to read back
  const std::string in = dir / "in.h5";
  {
    FrameSink sink = FrameSink::create(in, n, test_info());
    const auto a = sink.add_image("amplitude", ImageType::f32, h, w, "1", test_grid(), true);
    for (std::size_t f = 0; f < n; ++f) {
      sink.write_frame(a, f, sink_values(f, h, w).amplitude);
      sink.mark_done(f, static_cast<std::int64_t>(f));
    }
    sink.finish();
  }
  FrameSource src = FrameSource::open(in, "/amplitude");
  FrameSink sink = FrameSink::create(dir / "out.h5", n, test_info());
  const auto a = sink.add_image("amplitude", ImageType::f32, h, w, "1", test_grid(), true);
  std::size_t mismatches = 0;
  std::thread reader([&] {
    Image<float> frame(h, w);
    for (int round = 0; round < 5; ++round)
      for (std::size_t f = 0; f < n; ++f) {
        src.read(f, frame);
        if (frame(3, 4) != sink_values(f, h, w).amplitude(3, 4)) ++mismatches;
      }
  });
  for (std::size_t f = 0; f < n; ++f) {
    sink.write_frame(a, f, sink_values(f, h, w).amplitude);
    sink.mark_done(f, static_cast<std::int64_t>(f));
  }
  reader.join();
  sink.finish();
  CHECK(mismatches == 0);
  FrameSource back = FrameSource::open(dir / "out.h5", "/amplitude");
  Image<float> frame(h, w);
  back.read(n - 1, frame);
  CHECK(frame(5, 6) == sink_values(n - 1, h, w).amplitude(5, 6));
}
