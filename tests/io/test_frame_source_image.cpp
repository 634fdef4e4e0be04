// FrameSource::open_image (an HDF5 file held in memory, as the fuzz target
// reads it) against FrameSource::open on the same h5py-written files, and
// the refusal of frame shapes no camera makes.
#include "error_of.hpp"
#include "io_test.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/io/frame_source.hpp"

#include <catch2/catch.hpp>
#include <hdf5.h>

#include <fstream>
#include <iterator>
#include <span>
#include <vector>

using namespace wavestack;
using wavestack_test::error_of;
using namespace wavestack::io;

namespace {

/// The inputs of make_inputs.py, written once per test process.
const io_test::TempDir& inputs() { return io_test::generated_inputs(); }

std::vector<std::byte> file_bytes(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  const std::vector<char> c{std::istreambuf_iterator<char>(in), {}};
  const auto b = std::as_bytes(std::span(c));
  return {b.begin(), b.end()};
}

/// A chunked uint16 dataset /holograms of `dims` with no chunk written:
/// HDF5 reads it as fill values, so the small file is a valid HDF5 file
/// claiming any frame size (HDF5 User's Guide, "Fill values").
void write_unwritten_chunked(const std::string& path, std::vector<hsize_t> dims, std::vector<hsize_t> chunk) {
  std::lock_guard lock(hdf5_mutex());
  const hid_t f = H5Fcreate(path.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
  const hid_t space = H5Screate_simple(static_cast<int>(dims.size()), dims.data(), nullptr);
  const hid_t dcpl = H5Pcreate(H5P_DATASET_CREATE);
  H5Pset_chunk(dcpl, static_cast<int>(chunk.size()), chunk.data());
  const hid_t d = H5Dcreate2(f, "/holograms", H5T_STD_U16LE, space, H5P_DEFAULT, dcpl, H5P_DEFAULT);
  REQUIRE(d >= 0);
  H5Dclose(d);
  H5Pclose(dcpl);
  H5Sclose(space);
  REQUIRE(H5Fclose(f) >= 0);
}

} // namespace

TEST_CASE("a file image in memory reads the same frames as the file on disk") {
  for (const auto& [file, dataset] : {std::pair{"dtype_uint16be.h5", "/frames"}, {"multichunk.h5", "/frames"},
                                      {"rank2.h5", "/image"}}) {
    INFO(file);
    const std::string path = inputs() / file;
    FrameSource disk = FrameSource::open(path, dataset);
    const std::vector<std::byte> bytes = file_bytes(path);
    FrameSource mem = FrameSource::open_image(bytes, "memory.h5", dataset);
    CHECK(mem.path() == "memory.h5");
    CHECK(mem.dataset() == disk.dataset());
    REQUIRE(mem.count() == disk.count());
    REQUIRE(mem.height() == disk.height());
    REQUIRE(mem.width() == disk.width());
    CHECK(mem.dtype() == disk.dtype());
    CHECK(mem.chunk() == disk.chunk());
    CHECK(mem.attributes().size() == disk.attributes().size());
    Image<float> a(disk.height(), disk.width()), b(disk.height(), disk.width());
    for (std::size_t f = 0; f < disk.count(); ++f) {
      disk.read(f, a);
      mem.read(f, b);
      CHECK(std::equal(a.data(), a.data() + a.size(), b.data()));
    }
  }
}

TEST_CASE("two file images of one name are two files") {
  // HDF5 tells core-driver files apart by name: without a name of their
  // own the second image would read as the first.
  const std::vector<std::byte> a = file_bytes(inputs() / "dtype_uint8.h5");
  const std::vector<std::byte> b = file_bytes(inputs() / "dtype_float32.h5");
  FrameSource first = FrameSource::open_image(a, "camera.h5", "/frames");
  FrameSource second = FrameSource::open_image(b, "camera.h5", "/frames");
  CHECK(first.dtype() == DType::u8);
  CHECK(second.dtype() == DType::f32);
  CHECK(second.path() == "camera.h5");
}

TEST_CASE("a file image that is not HDF5 is an input error naming it") {
  const std::vector<std::byte> good = file_bytes(inputs() / "dtype_uint8.h5");
  const std::vector<std::byte> empty;
  const std::vector<std::byte> text(100, std::byte{'x'});
  const std::vector<std::byte> half(good.begin(), good.begin() + static_cast<std::ptrdiff_t>(good.size() / 2));
  for (const auto* bytes : {&empty, &text, &half}) {
    const Error e = error_of([&] { FrameSource::open_image(*bytes, "camera.h5", "/frames"); });
    CHECK(e.kind() == ErrorKind::input);
    CHECK(e.context().file == "camera.h5");
  }
}

TEST_CASE("frames larger than any camera's are refused from a file and from an image") {
  // A 1 KiB file can claim 16 x 2^40 pixel frames (fuzz/make_seeds.py has
  // the same as a regression input); nothing frame-sized may be allocated.
  io_test::TempDir dir("image_huge");
  write_unwritten_chunked(dir / "huge.h5", {2, 16, hsize_t{1} << 40}, {1, 16, 1024});
  for (bool in_memory : {false, true}) {
    const Error e = error_of([&] {
      if (in_memory) FrameSource::open_image(file_bytes(dir / "huge.h5"), "huge.h5", "/holograms");
      else FrameSource::open(dir / "huge.h5", "/holograms");
    });
    CHECK(e.kind() == ErrorKind::input);
    CHECK_THAT(e.message(), Catch::Contains("16x1099511627776"));
  }
  // 2^33 x 2^33: the pixel count overflows 64 bits.
  write_unwritten_chunked(dir / "overflow.h5", {hsize_t{1} << 33, hsize_t{1} << 33}, {16, 16});
  const Error e = error_of([&] { FrameSource::open(dir / "overflow.h5", "/holograms"); });
  CHECK(e.kind() == ErrorKind::input);
}
