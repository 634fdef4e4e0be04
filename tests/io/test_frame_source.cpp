// FrameSource against files written by h5py (tests/io/make_inputs.py), so the
// reader is checked on files it did not produce.
#include "io_test.hpp"
#include "wavestack/core/error.hpp"
#include "wavestack/io/frame_source.hpp"

#include <catch2/catch.hpp>

#include <cmath>
#include <map>
#include <memory>

using namespace wavestack;
using namespace wavestack::io;

namespace {

/// The inputs of make_inputs.py, written once per test process.
const io_test::TempDir& inputs() { return io_test::generated_inputs(); }

/// v(f, y, x) of make_inputs.py.
double pattern(std::size_t f, std::size_t y, std::size_t x) {
  return static_cast<double>((131 * f + 17 * y + 3 * x) % 251);
}

/// Stored value per type, as in make_inputs.py SCALE.
double scaled(const std::string& type, double v) {
  static const std::map<std::string, double (*)(double)> table = {
      {"uint8", [](double v) { return v; }},
      {"int8", [](double v) { return v - 125; }},
      {"uint16", [](double v) { return v * 257; }},
      {"int16", [](double v) { return (v - 125) * 257; }},
      {"uint32", [](double v) { return v * 16411 + 1000000; }},
      {"int32", [](double v) { return (v - 125) * 16411; }},
      {"uint64", [](double v) { return v * 16411 + 3000000; }},
      {"int64", [](double v) { return (v - 125) * 16411 - 1000; }},
      {"float32", [](double v) { return (v - 125) * 0.25; }},
      {"float64", [](double v) { return (v - 125) * 0.1; }},
      {"uint16be", [](double v) { return v * 257; }},
      {"float32be", [](double v) { return (v - 125) * 0.25; }},
  };
  return table.at(type)(v);
}

/// The Error thrown by `f`, or a failed test.
template <class F> Error error_of(F&& f) {
  try {
    f();
  } catch (const Error& e) {
    return e;
  }
  FAIL("no wavestack::Error was thrown");
  throw; // not reached
}

} // namespace

TEST_CASE("every accepted element type reads back as the values h5py wrote") {
  const auto& dir = inputs();
  const char* types[] = {"uint8", "int8",  "uint16",  "int16",    "uint32",   "int32",
                         "uint64", "int64", "float32", "float64", "uint16be", "float32be"};
  for (const std::string type : types) {
    INFO(type);
    FrameSource src = FrameSource::open(dir / ("dtype_" + type + ".h5"), "/frames");
    REQUIRE(src.count() == 3);
    REQUIRE(src.height() == 37);
    REQUIRE(src.width() == 53);
    CHECK(src.rank() == 3);
    std::string expected_name = type.substr(0, type.size() - (type.ends_with("be") ? 2 : 0));
    CHECK(src.dtype_name() == expected_name);
    Image<float> frame(37, 53), via_raw(37, 53);
    std::vector<unsigned char> raw(src.raw_frame_bytes());
    CHECK(raw.size() == 37 * 53 * dtype_size(src.dtype()));
    for (std::size_t f = 0; f < 3; ++f) {
      src.read(f, frame);
      // The pipeline's path: raw read, conversion in the parallel stage.
      src.read_raw(f, raw.data());
      FrameSource::convert_raw(src.dtype(), raw.data(), via_raw.view());
      std::size_t bad = 0, bad_raw = 0;
      for (std::size_t y = 0; y < 37; ++y)
        for (std::size_t x = 0; x < 53; ++x) {
          // HDF5 converts to float32 like a C cast (round to nearest), so
          // the expected value is the double formula cast to float: exact.
          if (frame(y, x) != static_cast<float>(scaled(type, pattern(f, y, x)))) ++bad;
          if (via_raw(y, x) != frame(y, x)) ++bad_raw;
        }
      CHECK(bad == 0);
      CHECK(bad_raw == 0);
    }
  }
}

TEST_CASE("camera-sized frames (1200x1920) read one frame at a time") {
  FrameSource src = FrameSource::open(inputs() / "big_uint16.h5", "frames");
  REQUIRE(src.count() == 3);
  REQUIRE(src.height() == 1200);
  REQUIRE(src.width() == 1920);
  CHECK(src.dataset() == "/frames");
  CHECK(src.chunk() == std::vector<std::uint64_t>{1, 1200, 1920});
  Image<float> frame(1200, 1920);
  src.read(2, frame);
  std::size_t bad = 0;
  for (std::size_t y = 0; y < 1200; y += 7)
    for (std::size_t x = 0; x < 1920; x += 3)
      if (frame(y, x) != static_cast<float>(pattern(2, y, x) * 257)) ++bad;
  CHECK(bad == 0);
}

TEST_CASE("chunks spanning several frames read correctly in any order") {
  FrameSource src = FrameSource::open(inputs() / "multichunk.h5", "/frames");
  REQUIRE(src.count() == 10);
  CHECK(src.chunk() == std::vector<std::uint64_t>{5, 20, 48});
  Image<float> frame(40, 48);
  for (std::size_t f : {9u, 0u, 4u, 5u, 3u}) {
    src.read(f, frame);
    std::size_t bad = 0;
    for (std::size_t y = 0; y < 40; ++y)
      for (std::size_t x = 0; x < 48; ++x)
        if (frame(y, x) != static_cast<float>(pattern(f, y, x) * 257)) ++bad;
    CHECK(bad == 0);
  }
}

TEST_CASE("a rank-2 dataset is one frame, and its attributes are listed") {
  FrameSource src = FrameSource::open(inputs() / "rank2.h5", "/image");
  CHECK(src.rank() == 2);
  CHECK(src.count() == 1);
  CHECK(src.height() == 40);
  CHECK(src.width() == 48);
  CHECK(src.dtype() == DType::f64);
  Image<float> frame(40, 48);
  src.read(0, frame);
  CHECK(frame(5, 7) == static_cast<float>((pattern(0, 5, 7) - 125) * 0.1));
  CHECK(frame(39, 47) == static_cast<float>((pattern(0, 39, 47) - 125) * 0.1));

  std::map<std::string, Attribute> attrs;
  for (const auto& a : src.attributes()) attrs[a.name] = a;
  REQUIRE(attrs.size() == 5);
  CHECK(attrs["exposure_time"].value == "0.004");
  CHECK(attrs["exposure_time"].type == "float64");
  CHECK(attrs["camera"].value == "test camera");
  CHECK(attrs["camera"].type == "string");
  CHECK(attrs["binning"].value == "2");
  CHECK(attrs["binning"].type == "int32");
  CHECK(attrs["roi"].value == "[0, 0, 40, 48]");
  CHECK(attrs["label_fixed"].value == "fixed");

  const auto root = read_attributes(inputs() / "rank2.h5", "/");
  REQUIRE(root.size() == 1);
  CHECK(root[0].name == "instrument");
  CHECK(root[0].value == "bench 1");
}

TEST_CASE("a frame is read into a strided window of a larger image") {
  FrameSource src = FrameSource::open(inputs() / "dtype_uint16.h5", "/frames");
  Image<float> big(50, 70, -1.0f);
  src.read(1, big.view().sub(3, 5, 37, 53));
  CHECK(big(3, 5) == static_cast<float>(pattern(1, 0, 0) * 257));
  CHECK(big(3 + 36, 5 + 52) == static_cast<float>(pattern(1, 36, 52) * 257));
  CHECK(big(2, 5) == -1.0f);       // row above untouched
  CHECK(big(3, 4) == -1.0f);       // column left untouched
  CHECK(big(3, 5 + 53) == -1.0f);  // column right untouched
  // and back to a contiguous buffer with the same source
  Image<float> frame(37, 53);
  src.read(2, frame);
  CHECK(frame(10, 10) == static_cast<float>(pattern(2, 10, 10) * 257));
}

TEST_CASE("list_datasets shows every dataset with shape, type, chunks and filters") {
  const auto list = FrameSource::list_datasets(inputs() / "dtype_uint16.h5");
  REQUIRE(list.size() == 1);
  CHECK(list[0].path == "/frames");
  CHECK(list[0].shape == std::vector<std::uint64_t>{3, 37, 53});
  CHECK(list[0].type == "uint16");
  const auto bad = list_datasets(inputs() / "bad.h5");
  CHECK(bad.size() == 14);
  bool inner = false;
  for (const auto& d : bad) inner |= d.path == "/group/inner";
  CHECK(inner);
  // make_inputs.py writes dtype_int16 (index 3 of SCALE, 3 % 3 == 0) contiguous and
  // dtype_uint16 (index 2) with chunks + gzip + shuffle
  CHECK(list[0].chunk == std::vector<std::uint64_t>{1, 37, 53});
  CHECK(list[0].filters == std::vector<std::string>{"shuffle", "deflate"});
  CHECK(list_datasets(inputs() / "dtype_int16.h5")[0].chunk.empty());
  CHECK(list_datasets(inputs() / "bad.h5", 3).size() == 3);
  CHECK_THAT(hdf5_version(), Catch::Matches("[0-9]+\\.[0-9]+\\.[0-9]+"));
}

TEST_CASE("bad input files and datasets give input errors that say what is wrong") {
  const auto& dir = inputs();
  const std::string bad = dir / "bad.h5";
  struct Case {
    std::string file, dataset;
    std::vector<std::string> words;
  };
  const std::vector<Case> cases = {
      {dir / "missing.h5", "/frames", {"does not exist"}},
      {dir / "not_hdf5.h5", "/frames", {"not an HDF5 file"}},
      {dir.path.string(), "/frames", {"folder"}},
      {bad, "/nothere", {"no dataset /nothere", "/complex", "/empty", "..."}},
      {bad, "", {"no dataset was given", "/rank1"}},
      {bad, "/group", {"/group is a group"}},
      {bad, "/group/nothere/deeper", {"no dataset /group/nothere/deeper"}},
      {bad, "/rank1", {"one-dimensional", "(100)"}},
      {bad, "/rank4", {"4 dimensions", "2x3x32x32"}},
      {bad, "/empty", {"empty dimension", "0x32x32"}},
      {bad, "/small", {"8x8", "at least 16x16"}},
      {bad, "/narrow", {"64x10", "at least 16x16"}},
      {bad, "/strings", {"element type string"}},
      {bad, "/complex", {"element type compound {r: float32, i: float32}"}},
      {bad, "/half", {"element type float16"}},
      {bad, "/flags", {"element type enum"}},
      {bad, "/scalar", {"scalar"}},
  };
  for (const auto& c : cases) {
    INFO(c.file << ":" << c.dataset);
    const Error e = error_of([&] { FrameSource::open(c.file, c.dataset); });
    CHECK(e.kind() == ErrorKind::input);
    CHECK(e.exit_code() == 3);
    CHECK(e.context().file == c.file);
    const std::string what = e.what();
    CHECK_THAT(what, Catch::StartsWith(c.file + ": "));
    if (!c.dataset.empty()) CHECK_THAT(what, Catch::Contains(c.dataset));
    for (const auto& w : c.words) CHECK_THAT(what, Catch::Contains(w));
  }
  // the listing of a file with more than 10 datasets is shortened
  const Error e = error_of([&] { FrameSource::open(bad, "/nothere"); });
  CHECK_THAT(e.message(), Catch::Contains(", ...") && !Catch::Contains("/strings"));
}

TEST_CASE("a frame index out of range is an input error naming the frame") {
  FrameSource src = FrameSource::open(inputs() / "dtype_float32.h5", "/frames");
  Image<float> frame(37, 53);
  const Error e = error_of([&] { src.read(3, frame); });
  CHECK(e.kind() == ErrorKind::input);
  CHECK(e.context().frame == 3);
  CHECK_THAT(e.what(), Catch::Contains("frame 3 is out of range") && Catch::Contains("3 frames (0 to 2)") &&
                           Catch::Contains("dataset /frames"));
  Image<float> wrong(36, 53);
  CHECK(error_of([&] { src.read(0, wrong); }).kind() == ErrorKind::internal);
}

TEST_CASE("split_dataset_spec separates file and dataset") {
  struct Row {
    std::string spec, file, dataset;
  };
  const std::vector<Row> rows = {
      {"holograms.h5:/holograms", "holograms.h5", "/holograms"},
      {"data/run 1.h5:/group/frames", "data/run 1.h5", "/group/frames"},
      {"blank.h5:holograms", "blank.h5", "/holograms"},
      {"blank.h5", "blank.h5", ""},
      {"blank.h5:", "blank.h5", ""},
      {"a:b.h5:/x", "a:b.h5", "/x"},
  };
  for (const auto& r : rows) {
    INFO(r.spec);
    const auto s = split_dataset_spec(r.spec);
    CHECK(s.file == r.file);
    CHECK(s.dataset == r.dataset);
  }
  // an existing file whose name contains ':' is taken whole
  io_test::TempDir dir("spec");
  const std::string odd = dir / "run:2.h5";
  { std::ofstream(odd) << "x"; }
  CHECK(split_dataset_spec(odd).file == odd);
  CHECK(split_dataset_spec(odd).dataset.empty());
  CHECK(error_of([] { split_dataset_spec(":/x"); }).kind() == ErrorKind::config);
}

TEST_CASE("two sources on one file (holograms and background) live independently") {
  auto first = std::make_unique<FrameSource>(FrameSource::open(inputs() / "dtype_uint16.h5", "/frames"));
  FrameSource second = FrameSource::open(inputs() / "dtype_uint16.h5", "/frames");
  Image<float> frame(37, 53);
  first->read(0, frame);
  first.reset(); // closing one must not close the other's dataset
  second.read(2, frame);
  CHECK(frame(1, 2) == static_cast<float>(pattern(2, 1, 2) * 257));
  // moving keeps the open dataset
  FrameSource moved = std::move(second);
  moved.read(1, frame);
  CHECK(frame(1, 2) == static_cast<float>(pattern(1, 1, 2) * 257));
}
